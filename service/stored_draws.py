"""A finished job's draws, read one quantity at a time: what the finishing step summarises.

The store keeps each chain's draws as one compressed (draws, quantities) array. Summaries and
diagnostics need one quantity across every chain; decoding the chains whole to get there holds the
job's whole draw matrix in memory (four chains of 100,000 draws of 100 quantities: 320 MB, plus a
decoded copy). Instead each chain is inflated a block of rows at a time (its SHA-256 checked on the
way) and its columns are written to a temporary file laid out by quantity, then chain, then draw,
so that a quantity is then one contiguous read. Memory: a block of rows (on SQLite the stored
bytes are read in pieces too; elsewhere one chain's compressed bytes are held while it is read).
Disk: the job's draws, in a file that is gone when this is closed (or the process ends).
"""

from __future__ import annotations

import os
import tempfile
from types import TracebackType
from typing import Any

import numpy as np
from sqlalchemy import select

from service.store.arrays import PIECE_BYTES, row_blocks
from service.store.large_values import chain_array_data
from service.store.models import ChainArray

ITEM = np.dtype(np.float64).itemsize


class StoredDraws:
    """The draws of the given chains (in that order) as (chains, draws, quantities), behind
    ``quantity(j)`` (worker.diagnostics.summary.QuantityDraws). ``length`` keeps each chain's
    first ``length`` draws only (a timed-out job's common prefix); by default every chain must
    have the same number."""

    def __init__(self, runtime: Any, chain_ids: list[int], length: int | None = None):
        with runtime.sessions() as session:
            shapes = [
                session.scalars(
                    select(ChainArray.shape).where(
                        ChainArray.chain_id == chain_id, ChainArray.kind == "draws"
                    )
                ).one()
                for chain_id in chain_ids
            ]
        widths = {int(shape[1]) for shape in shapes}
        if len(widths) > 1:
            raise ValueError(f"chains with different quantities cannot be pooled: {shapes}")
        counts = [int(shape[0]) for shape in shapes]
        if length is None and len(set(counts)) > 1:
            raise ValueError(f"chains of different lengths cannot be pooled: {counts}")
        draws = min(counts, default=0) if length is None else int(length)
        if draws > min(counts, default=0):
            raise ValueError(f"{draws} draws asked for; the shortest chain has {min(counts)}")
        self.shape = (len(chain_ids), draws, widths.pop() if widths else 0)
        self._file = tempfile.TemporaryFile(prefix="drawyard-draws-")
        try:
            for position, chain_id in enumerate(chain_ids):
                self._spill(runtime, position, chain_id)
        except BaseException:
            self.close()
            raise

    def _offset(self, quantity: int, chain: int, draw: int) -> int:
        chains, draws, _ = self.shape
        return ((quantity * chains + chain) * draws + draw) * ITEM

    def _spill(self, runtime: Any, position: int, chain_id: int) -> None:
        _, draws, width = self.shape
        rows = max(1, PIECE_BYTES // (ITEM * max(1, width)))
        start = 0
        descriptor = self._file.fileno()
        with runtime.sessions() as session:
            row_id, sha256 = session.execute(
                select(ChainArray.id, ChainArray.sha256).where(
                    ChainArray.chain_id == chain_id, ChainArray.kind == "draws"
                )
            ).one()
            # every block is read, past the kept prefix too, so the whole checksum is checked
            with chain_array_data(session, row_id) as data:
                for block in row_blocks(data, rows, sha256):
                    kept = block[: max(0, draws - start)]
                    if kept.size:
                        self._write_columns(descriptor, position, start, kept)
                    start += block.shape[0]

    def _write_columns(self, descriptor: int, chain: int, start: int, rows: np.ndarray) -> None:
        columns = np.ascontiguousarray(rows.T, dtype=np.float64)
        for quantity, column in enumerate(columns):
            at = self._offset(quantity, chain, start)
            if os.pwrite(descriptor, column, at) != column.nbytes:
                raise OSError("the draws' temporary file took a short write (disk full?)")

    def quantity(self, index: int) -> np.ndarray:
        """Quantity ``index``'s draws, (chains, draws) float64."""
        chains, draws, width = self.shape
        if not 0 <= index < width:
            raise IndexError(f"quantity {index} outside 0..{width - 1}")
        values = np.empty((chains, draws))
        view = memoryview(values).cast("B")
        offset, done = self._offset(index, 0, 0), 0
        while done < len(view):
            got = os.preadv(self._file.fileno(), [view[done:]], offset + done)
            if got <= 0:
                raise OSError("the draws' temporary file ended early")
            done += got
        return values

    def close(self) -> None:
        self._file.close()

    def __enter__(self) -> StoredDraws:
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        error: BaseException | None,
        trace: TracebackType | None,
    ) -> None:
        self.close()
