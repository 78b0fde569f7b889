"""Streaming stored chain arrays out as JSON or CSV, one chain in memory at a time.

Numbers are written with 17 significant digits, which reads back as exactly the stored float64
(IEEE 754 double: 17 significant decimal digits always round-trip; common practice). NaN and the
infinities, which JSON cannot hold, are written as the strings "NaN", "Infinity", "-Infinity".
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

# Rows formatted per block: bounds the text held in memory for a long chain.
ROWS_PER_BLOCK = 2000


@dataclass(frozen=True)
class Selection:
    chains: list[int]  # 0-based chain indices, in the order asked
    columns: list[int]  # indices into the stored columns
    names: list[str]  # names of the chosen columns
    thin: int
    # natural type of each chosen column (service/formats/column_types.py); empty: all float64
    types: tuple[str, ...] = ()


def _format_cells(block: np.ndarray, nan: str, inf: str, minus_inf: str) -> np.ndarray:
    """A string array of ``block``'s cells, vectorised over rows."""
    values = np.asarray(block, dtype=np.float64)
    cells = np.char.mod("%.17g", values)
    if not np.isfinite(values).all():
        cells = cells.astype(object)
        cells[np.isnan(values)] = nan
        cells[values == np.inf] = inf
        cells[values == -np.inf] = minus_inf
        cells = cells.astype(str)
    return cells


def _retype_cells(
    cells: np.ndarray, values: np.ndarray, types: Sequence[str], words: tuple[str, str, str]
) -> np.ndarray:
    """Cells of whole-number columns as integers (``missing`` where there is no value) and of
    yes/no columns as ``true``/``false``; ``words`` is (true, false, missing)."""
    special = [i for i, kind in enumerate(types) if kind != "float64"]
    if not special:
        return cells
    cells = cells.astype(object)
    true, false, missing = words
    for i in special:
        column = values[:, i]
        if types[i] == "bool":
            cells[:, i] = np.where(column != 0, true, false)
        else:
            finite = np.isfinite(column)
            whole = np.char.mod("%d", np.where(finite, column, 0).astype(np.int64))
            cells[:, i] = np.where(finite, whole, missing)
    return cells.astype(str)


def _join_columns(cells: np.ndarray, separator: str) -> np.ndarray:
    """One string per row: the row's cells joined (a loop over columns, never over rows)."""
    if cells.shape[1] == 0:
        return np.full(cells.shape[0], "", dtype=str)
    line = cells[:, 0]
    for column in range(1, cells.shape[1]):
        line = np.char.add(np.char.add(line, separator), cells[:, column])
    return line


def json_rows(values: np.ndarray, types: Sequence[str] = ()) -> Iterator[str]:
    """``[a,b,...]`` rows separated by commas, block by block."""
    for start in range(0, values.shape[0], ROWS_PER_BLOCK):
        block = values[start : start + ROWS_PER_BLOCK]
        cells = _format_cells(block, '"NaN"', '"Infinity"', '"-Infinity"')
        cells = _retype_cells(cells, block, types, ("true", "false", "null"))
        lines = np.char.add(np.char.add("[", _join_columns(cells, ",")), "]")
        yield ("," if start else "") + ",".join(lines.tolist())


def csv_rows(
    chain_number: int, first_draw: int, thin: int, values: np.ndarray, types: Sequence[str] = ()
) -> Iterator[str]:
    """``chain,draw,values...`` lines; draw numbers are 1-based positions in the stored chain."""
    for start in range(0, values.shape[0], ROWS_PER_BLOCK):
        block = values[start : start + ROWS_PER_BLOCK]
        cells = _format_cells(block, "NaN", "Inf", "-Inf")
        # an empty field is what CSV readers take for a missing value
        cells = _retype_cells(cells, block, types, ("true", "false", ""))
        draw_numbers = first_draw + thin * np.arange(start, start + block.shape[0])
        prefix = np.char.add(f"{chain_number},", draw_numbers.astype(str))
        lines = _join_columns(cells, ",")
        if cells.shape[1]:
            lines = np.char.add(np.char.add(prefix, ","), lines)
        else:
            lines = prefix
        yield "\n".join(lines.tolist()) + "\n"


def csv_quote(name: str) -> str:
    """RFC 4180 quoting: a field with a comma, quote or line break goes in double quotes."""
    if any(ch in name for ch in ',"\n\r'):
        return '"' + name.replace('"', '""') + '"'
    return name


def stream_json(
    job_id: str,
    column_key: str,
    selection: Selection,
    load_chain: Callable[[int], np.ndarray],
    partial: bool = False,
) -> Iterator[str]:
    head = {"job": job_id, column_key: selection.names, "thin": selection.thin, "partial": partial}
    yield json.dumps(head)[:-1] + ',"chains":['
    for position, chain_index in enumerate(selection.chains):
        values = load_chain(chain_index)[:: selection.thin, selection.columns]
        yield ("," if position else "") + f'{{"chain":{chain_index + 1},"draws":['
        yield from json_rows(values, selection.types)
        yield "]}"
    yield "]}\n"


def stream_csv(
    selection: Selection, load_chain: Callable[[int], np.ndarray], header: Sequence[str]
) -> Iterator[str]:
    yield ",".join(csv_quote(h) for h in ["chain", "draw", *header]) + "\n"
    for chain_index in selection.chains:
        values = load_chain(chain_index)[:: selection.thin, selection.columns]
        yield from csv_rows(chain_index + 1, 1, selection.thin, values, selection.types)
