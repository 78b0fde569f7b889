"""Reading a job's data from a file: a JSON object, or CSV whose columns become vectors.

A CSV file's first row names the columns; each column becomes one input vector of the same name.
A column whose every cell is an integer literal stays integer (count and index inputs must be
integers), any other column is read as real numbers. Several files can be merged, so scalars such
as `n` can come from a small JSON file next to a CSV of the observations.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np


class DataFileError(ValueError):
    """The file cannot be read as data; the message says which file, column and row."""


def read_data_file(path: Path) -> dict[str, Any]:
    """Inputs from one file, by its extension: `.csv` as columns, anything else as JSON."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as error:
        raise DataFileError(f"{path}: cannot be read: {error}") from error
    suffix = path.suffix.lower()
    if suffix in (".csv", ".tsv"):
        return csv_columns(text, str(path), delimiter="\t" if suffix == ".tsv" else ",")
    try:
        data = json.loads(text)
    except ValueError as error:
        raise DataFileError(f"{path}: not JSON: {error}") from error
    if not isinstance(data, dict):
        raise DataFileError(f"{path}: expected a JSON object of input names to values")
    return data


def read_data_files(paths: Iterable[Path]) -> dict[str, Any]:
    """Inputs from several files merged in order; a name given twice is an error, not a silent
    overwrite, because two files disagreeing about an input is almost always a mistake."""
    merged: dict[str, Any] = {}
    origin: dict[str, Path] = {}
    for path in paths:
        for name, value in read_data_file(path).items():
            if name in merged:
                raise DataFileError(f"input '{name}' is given by both {origin[name]} and {path}")
            merged[name] = value
            origin[name] = path
    return merged


def csv_columns(text: str, source: str = "CSV", delimiter: str = ",") -> dict[str, list]:
    """Columns of a CSV text as {header: list of int or float}."""
    rows = list(csv.reader(io.StringIO(text), delimiter=delimiter))
    # Trailing empty lines are common at the end of exported files and mean nothing.
    while rows and not any(cell.strip() for cell in rows[-1]):
        rows.pop()
    if not rows:
        raise DataFileError(f"{source}: empty; the first row must name the columns")
    header = [name.strip() for name in rows[0]]
    _check_header(header, source)
    body = rows[1:]
    widths = np.fromiter(map(len, body), dtype=np.int64, count=len(body))
    ragged = np.flatnonzero(widths != len(header))
    if ragged.size:
        line = int(ragged[0]) + 2
        raise DataFileError(
            f"{source}, line {line}: {widths[ragged[0]]} cells, but the header names "
            f"{len(header)} columns"
        )
    cells = np.char.strip(np.array(body, dtype=str).reshape(len(body), len(header)))
    return {name: _column(cells[:, j], name, source) for j, name in enumerate(header)}


def _check_header(header: list[str], source: str) -> None:
    empty = [i + 1 for i, name in enumerate(header) if not name]
    if empty:
        raise DataFileError(f"{source}: column {empty[0]} has no name in the header row")
    seen: set[str] = set()
    for name in header:
        if name in seen:
            raise DataFileError(f"{source}: column '{name}' appears twice in the header row")
        seen.add(name)


def _column(cells: np.ndarray, name: str, source: str) -> list:
    blank = np.flatnonzero(cells == "")
    if blank.size:
        raise DataFileError(
            f"{source}, column '{name}', line {int(blank[0]) + 2}: empty cell; every row needs "
            "a value (missing observations have to be left out of the data, not left blank)"
        )
    # Integer literals only (an optional sign and digits): "3.0" and "1e3" are read as reals.
    digits = np.char.lstrip(cells, "+-")
    integral = np.char.isdigit(digits) & (np.char.str_len(cells) - np.char.str_len(digits) <= 1)
    if integral.all():
        return cells.astype(np.int64).tolist()
    try:
        return cells.astype(np.float64).tolist()
    except ValueError:
        pass
    bad = _first_unreadable(cells)
    raise DataFileError(
        f"{source}, column '{name}', line {bad + 2}: '{cells[bad]}' is not a number"
    )


def _first_unreadable(cells: np.ndarray) -> int:
    # Only reached on error: find the first cell float() refuses, to name it in the message.
    for index, cell in enumerate(cells.tolist()):
        try:
            float(cell)
        except ValueError:
            return index
    return 0
