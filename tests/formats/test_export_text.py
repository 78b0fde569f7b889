"""CSV and JSON text of stored draws (service/draw_export.py), block by block.

Checked against a cell-by-cell reference written with Python's own formatting, and by reading the
text back: 17 significant digits round-trip every float64 exactly (IEEE 754-2008, section 5.12.2:
17 decimal digits suffice for binary64; common practice). Non-finite values are written as the
words the module docstring names, and the block boundaries leave no trace in the text.
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest

from service import draw_export
from service.draw_export import csv_rows, json_rows

WORDS = {"NaN": np.nan, "Inf": np.inf, "-Inf": -np.inf}
JSON_WORDS = {"NaN": np.nan, "Infinity": np.inf, "-Infinity": -np.inf}


def _values(rows: int, columns: int, non_finite: bool) -> np.ndarray:
    rng = np.random.default_rng(rows * 31 + columns)
    values = rng.normal(0, 1, (rows, columns)) * 10.0 ** rng.integers(-300, 300, (rows, columns))
    values[0, :1] = 0.1
    if values.size >= 2:
        values[-1, -1] = 3.0  # a whole real: "3" in CSV, "3.0" in JSON
    if non_finite and values.size >= 4:
        flat = values.reshape(-1)
        flat[[1, 2, 3]] = [np.nan, np.inf, -np.inf]
    return values


def _reference_cell(x: float, words: dict[str, float], quoted: bool) -> str:
    for word, special in words.items():
        if (np.isnan(special) and np.isnan(x)) or x == special:
            return f'"{word}"' if quoted else word
    text = f"{x:.17g}"
    # JSON: a whole real keeps a decimal point, or a reader would take it for an integer
    if quoted and x == round(x) and abs(x) < 1e17:
        text += ".0"
    return text


@pytest.mark.parametrize("rows,columns,non_finite", [(1, 1, False), (5, 3, True), (4500, 7, True),
                                                      (3, 0, False)])
def test_csv_text_matches_the_cell_by_cell_reference_and_reads_back(
        rows, columns, non_finite, monkeypatch):
    monkeypatch.setattr(draw_export, "CELLS_PER_BLOCK", 7000)
    values = _values(rows, columns, non_finite)
    text = "".join(csv_rows(3, 2, 5, values))
    expected = "".join(
        ",".join(["3", str(2 + 5 * i)] + [_reference_cell(x, WORDS, False) for x in row]) + "\n"
        for i, row in enumerate(values.tolist()))
    assert text == expected
    parsed = list(csv.reader(io.StringIO(text)))
    back = np.array([[WORDS.get(c, None) if c in WORDS else float(c) for c in r[2:]]
                     for r in parsed], dtype=float).reshape(rows, columns)
    assert np.array_equal(back, values, equal_nan=True)


@pytest.mark.parametrize("rows,columns,non_finite", [(1, 1, False), (5, 3, True), (4500, 7, True)])
def test_json_text_matches_the_cell_by_cell_reference_and_reads_back(
        rows, columns, non_finite, monkeypatch):
    monkeypatch.setattr(draw_export, "CELLS_PER_BLOCK", 7000)
    values = _values(rows, columns, non_finite)
    text = "[" + "".join(json_rows(values)) + "]"
    expected = "[" + ",".join(
        "[" + ",".join(_reference_cell(x, JSON_WORDS, True) for x in row) + "]"
        for row in values.tolist()) + "]"
    assert text == expected
    assert not any(type(c) is int for row in json.loads(text) for c in row)
    back = np.array([[JSON_WORDS[c] if isinstance(c, str) else c for c in row]
                     for row in json.loads(text)], dtype=float)
    assert np.array_equal(back, values, equal_nan=True)
