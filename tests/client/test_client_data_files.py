"""Data files: JSON objects, and CSV columns read as vectors with integer columns kept integer.

External references: RFC 4180 (Shafranovich 2005, "Common Format and MIME Type for CSV Files")
section 2 — a header line, CRLF line breaks, fields in double quotes that may hold commas and
doubled quotes; numpy.genfromtxt as an independent reader of the same numbers.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest

from service.client.data_files import DataFileError, csv_columns, read_data_files

RFC_4180_STYLE = (
    'count,"rate, per week",store\r\n'
    '3,"1.25",1\r\n'
    '0,2e-3,2\r\n'
    '-12,"-0.5",2\r\n'
)


def test_csv_columns_become_vectors_and_integer_columns_stay_integers() -> None:
    columns = csv_columns(RFC_4180_STYLE)
    assert list(columns) == ["count", "rate, per week", "store"]  # RFC 4180 section 2, rule 6
    assert columns["count"] == [3, 0, -12]
    assert all(type(v) is int for v in columns["count"] + columns["store"])
    assert all(type(v) is float for v in columns["rate, per week"])
    reference = np.genfromtxt(
        io.StringIO("3,1.25,1\n0,2e-3,2\n-12,-0.5,2\n"), delimiter=",", dtype=float
    )
    np.testing.assert_array_equal(columns["rate, per week"], reference[:, 1])
    np.testing.assert_array_equal(columns["count"], reference[:, 0])


def test_reals_written_as_whole_numbers_with_a_point_are_reals() -> None:
    columns = csv_columns("y,k\n1.0,1\n2,2\n")
    assert columns["y"] == [1.0, 2.0] and type(columns["y"][1]) is float
    assert columns["k"] == [1, 2]


def test_files_merge_and_a_name_in_two_files_is_refused(tmp_path: Path) -> None:
    (tmp_path / "sizes.json").write_text(json.dumps({"n": 3}))
    (tmp_path / "rows.csv").write_text("y,group\n0.5,1\n1.5,2\n2.5,1\n\n")
    data = read_data_files([tmp_path / "sizes.json", tmp_path / "rows.csv"])
    assert data == {"n": 3, "y": [0.5, 1.5, 2.5], "group": [1, 2, 1]}
    (tmp_path / "again.json").write_text(json.dumps({"y": [1, 2, 3]}))
    with pytest.raises(DataFileError, match="'y' is given by both"):
        read_data_files([tmp_path / "rows.csv", tmp_path / "again.json"])


@pytest.mark.parametrize(
    ("text", "says"),
    [
        ("a,b\n1,2\n3\n", "line 3: 1 cells, but the header names 2 columns"),
        ("a,b\n1,\n", "column 'b', line 2: empty cell"),
        ("a,b\n1,2\n3,x\n", "column 'b', line 3: 'x' is not a number"),
        ("a,a\n1,2\n", "column 'a' appears twice"),
        ("", "empty"),
    ],
)
def test_unreadable_csv_says_where(text: str, says: str) -> None:
    with pytest.raises(DataFileError, match=says):
        csv_columns(text, "rows.csv")


def test_a_json_data_file_must_be_an_object(tmp_path: Path) -> None:
    (tmp_path / "list.json").write_text("[1, 2]")
    with pytest.raises(DataFileError, match="expected a JSON object"):
        read_data_files([tmp_path / "list.json"])
