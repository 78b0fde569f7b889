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

# Cells formatted per block: bounds the text (and the Python numbers it is made from) held in
# memory at once, about 2 MB, however long the chain and however many its quantities. Our choice:
# large enough that the per-block Python work is noise beside the formatting itself.
CELLS_PER_BLOCK = 50_000


def _rows_per_block(columns: int) -> int:
    return max(1, CELLS_PER_BLOCK // max(1, columns))


@dataclass(frozen=True)
class Selection:
    chains: list[int]  # 0-based chain indices, in the order asked
    columns: list[int]  # indices into the stored columns
    names: list[str]  # names of the chosen columns
    thin: int
    # natural type of each chosen column (service/formats/column_types.py); empty: all float64
    types: tuple[str, ...] = ()


# Python's own %-formatting of a float with 17 significant digits; finite values never contain a
# letter, so the non-finite words can be found and replaced in a block's text afterwards.
_CELL = "%.17g"
_NON_FINITE = (("nan", "NaN"), ("-inf", "-Inf"), ("inf", "Inf"))
_NON_FINITE_JSON = (("nan", '"NaN"'), ("-inf", '"-Infinity"'), ("inf", '"Infinity"'))


def _formatted(template: str, values: list, block: np.ndarray,
               words: tuple[tuple[str, str], ...]) -> str:
    """``template % values``: one C-level formatting pass over a whole block of rows.

    The block's text is the only thing built (a few bytes per cell more than the numbers), so the
    memory a download holds is bounded by one block of rows, whatever the chain's length.
    """
    text = template % tuple(values)
    if not np.isfinite(block).all():
        for word, replacement in words:
            text = text.replace(word, replacement)
    return text


def _cell_formats(types: Sequence[str], columns: int) -> list[str]:
    """Reals with 17 digits; whole numbers and yes/no as the text _typed_cells makes of them."""
    kinds = list(types) or ["float64"] * columns
    return [_CELL if kind == "float64" else "%s" for kind in kinds]


def _typed_cells(
    block: np.ndarray, types: Sequence[str], words: tuple[str, str, str]
) -> np.ndarray:
    """The block as the values its template formats: unchanged when every column is real (the
    fast path), else an object array with whole numbers as Python ints (``missing`` where there is
    no value) and yes/no as ``true``/``false``; ``words`` is (true, false, missing)."""
    special = [i for i, kind in enumerate(types) if kind != "float64"]
    if not special:
        return block
    cells = block.astype(object)
    true, false, missing = words
    for i in special:
        column = block[:, i]
        if types[i] == "bool":
            cells[:, i] = np.where(column != 0, true, false)
        else:
            finite = np.isfinite(column)
            whole = np.where(finite, column, 0).astype(np.int64).astype(object)
            cells[:, i] = np.where(finite, whole, missing)
    return cells


def _with_decimal_points(cells: np.ndarray, block: np.ndarray, types: Sequence[str]) -> np.ndarray:
    """The block's cells with every real column's cells as text, a whole value carrying ".0".

    ``%.17g`` prints 1.0 as ``1``, which a JSON reader takes for an integer, so a real column
    (an acceptance probability of exactly one, a quantity at a bound) would come back with mixed
    types. Only blocks holding such a value take this slower path."""
    cells = np.array(cells, dtype=object)
    for i, kind in enumerate(list(types) or ["float64"] * block.shape[1]):
        if kind != "float64":
            continue
        column = block[:, i]
        text = np.char.mod(_CELL, column).astype(object)
        whole = np.isfinite(column) & (column == np.round(column)) & (np.abs(column) < 1e17)
        text[whole] = text[whole] + ".0"
        cells[:, i] = text
    return cells


def _has_whole_reals(block: np.ndarray, types: Sequence[str]) -> bool:
    real = np.array([kind == "float64" for kind in types], dtype=bool) if types else slice(None)
    values = block[:, real]
    return bool(np.any(np.isfinite(values) & (values == np.round(values))))


def json_rows(values: np.ndarray, types: Sequence[str] = ()) -> Iterator[str]:
    """``[a,b,...]`` rows separated by commas, block by block; every cell of a real column has a
    decimal point or an exponent, so JSON readers type it as a float."""
    values = np.asarray(values, dtype=np.float64)
    line = "[" + ",".join(_cell_formats(types, values.shape[1])) + "]"
    as_text = "[" + ",".join(["%s"] * values.shape[1]) + "]"
    step = _rows_per_block(values.shape[1])
    for start in range(0, values.shape[0], step):
        block = values[start : start + step]
        cells = _typed_cells(block, types, ("true", "false", "null"))
        row = line
        if _has_whole_reals(block, types):
            cells, row = _with_decimal_points(cells, block, types), as_text
        template = ",".join([row] * block.shape[0])
        text = _formatted(template, cells.ravel().tolist(), block, _NON_FINITE_JSON)
        yield ("," if start else "") + text


def csv_rows(
    chain_number: int, first_draw: int, thin: int, values: np.ndarray, types: Sequence[str] = ()
) -> Iterator[str]:
    """``chain,draw,values...`` lines; draw numbers are 1-based positions in the stored chain."""
    values = np.asarray(values, dtype=np.float64)
    columns = values.shape[1]
    line = f"{chain_number},%d" + "".join("," + f for f in _cell_formats(types, columns)) + "\n"
    step = _rows_per_block(columns)
    for start in range(0, values.shape[0], step):
        block = values[start : start + step]
        rows = block.shape[0]
        # each row's draw number (exact as a float64 below 2^53; %d prints it whole), then its
        # cells, in one flat list matching the template
        draw_numbers = first_draw + thin * np.arange(start, start + rows, dtype=np.float64)
        # an empty field is what CSV readers take for a missing value
        typed = _typed_cells(block, types, ("true", "false", ""))
        cells = np.column_stack((draw_numbers.astype(typed.dtype), typed)).ravel().tolist()
        yield _formatted(line * rows, cells, block, _NON_FINITE)


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
