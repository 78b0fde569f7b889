"""NumPy .npz downloads, streamed entry by entry through an unseekable zip stream.

Each column is one ``.npy`` entry (NumPy format version 1.0; NEP 1). The header of a column gives
its full length, known up front from the stored shapes, and the data follows chain by chain, so the
whole table never sits in memory. Entries: wide ``chain``, ``draw`` (int64), ``values`` (rows,
quantities; float64, which holds every whole number and yes/no exactly) and the names; long
``chain``, ``draw``, the name per row, ``value`` and the names; both ``types``, each column's
natural type (float64, int64 or bool) in the order of the names. Arrays are
plain numeric or fixed-width unicode, so they load with ``allow_pickle=False``.
"""

from __future__ import annotations

import zipfile
from collections.abc import Callable, Iterable, Iterator

import numpy as np
from numpy.lib import format as npy_format

from service.draw_export import Selection
from service.formats.layouts import thinned_length
from service.formats.spool import Spool

MEDIA_TYPE = "application/x-npz"


def _entry(
    zf: zipfile.ZipFile,
    spool: Spool,
    name: str,
    dtype: np.dtype,
    shape: tuple[int, ...],
    parts: Iterable[np.ndarray],
) -> Iterator[bytes]:
    """One ``.npy`` member: the header for the full shape, then the parts in order."""
    with zf.open(name + ".npy", mode="w", force_zip64=True) as member:
        header = {"descr": npy_format.dtype_to_descr(dtype), "fortran_order": False, "shape": shape}
        npy_format.write_array_header_1_0(member, header)
        for part in parts:
            member.write(np.ascontiguousarray(part, dtype=dtype).tobytes())
            yield spool.take()
    yield spool.take()


def stream_npz(
    selection: Selection,
    load_chain: Callable[[int], np.ndarray],
    stored_rows: dict[int, int],
    layout: str,
    value_label: str = "quantity",
    names_label: str = "quantities",
) -> Iterator[bytes]:
    """The archive's bytes; ``stored_rows`` maps a 0-based chain index to its stored row count."""
    names = list(selection.names)
    width = len(names)
    counts = [thinned_length(stored_rows[c], selection.thin) for c in selection.chains]
    total = sum(counts)
    # Long rows repeat each draw once per quantity; wide rows hold a draw each.
    per_row = width if layout == "long" else 1
    labels = np.asarray(names, dtype=f"<U{max([len(n) for n in names] + [1])}")

    def chain_numbers() -> Iterator[np.ndarray]:
        for chain, count in zip(selection.chains, counts, strict=True):
            yield np.full(count * per_row, chain + 1, np.int64)

    def draw_numbers() -> Iterator[np.ndarray]:
        for count in counts:
            yield np.repeat(1 + selection.thin * np.arange(count, dtype=np.int64), per_row)

    def chain_values() -> Iterator[np.ndarray]:
        for chain in selection.chains:
            yield load_chain(chain)[:: selection.thin, selection.columns]

    spool = Spool()
    with zipfile.ZipFile(spool, mode="w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        yield from _entry(zf, spool, "chain", np.dtype("<i8"), (total * per_row,), chain_numbers())
        yield from _entry(zf, spool, "draw", np.dtype("<i8"), (total * per_row,), draw_numbers())
        if layout == "wide":
            yield from _entry(zf, spool, "values", np.dtype("<f8"), (total, width), chain_values())
        else:
            per_chain_labels = (np.tile(labels, count) for count in counts)
            yield from _entry(
                zf, spool, value_label, labels.dtype, (total * width,), per_chain_labels
            )
            flat = (values.reshape(-1) for values in chain_values())
            yield from _entry(zf, spool, "value", np.dtype("<f8"), (total * width,), flat)
        yield from _entry(zf, spool, names_label, labels.dtype, (width,), [labels])
        # One matrix has one type: each column's natural one is named here, to cast by.
        kinds = np.asarray(list(selection.types) or ["float64"] * width, dtype="<U7")
        yield from _entry(zf, spool, "types", kinds.dtype, (width,), [kinds])
    yield spool.take()
