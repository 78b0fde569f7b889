"""The two table layouts of a download, built one chain at a time.

Wide: one row per chain and draw, one column per quantity. Long: one row per chain, draw and
quantity, with the quantity's name in a column and its value in another. Rows run chain by chain,
draw by draw, and (long) quantity by quantity in the stored column order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

LAYOUTS = ("wide", "long")


@dataclass(frozen=True)
class ChainBlock:
    """One chain's part of a download: its number, 1-based draw numbers and the value matrix."""

    chain: int
    draw: np.ndarray  # int64, (rows,)
    values: np.ndarray  # float64, (rows, quantities)


def chain_block(chain_number: int, thin: int, values: np.ndarray) -> ChainBlock:
    """Draw numbers are positions in the stored chain (1-based), so thinning leaves gaps."""
    rows = values.shape[0]
    draw = 1 + thin * np.arange(rows, dtype=np.int64)
    return ChainBlock(chain_number, draw, np.ascontiguousarray(values, dtype=np.float64))


def long_columns(
    block: ChainBlock, quantity_count: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """chain, draw and quantity index per long row; the values are ``block.values.reshape(-1)``."""
    rows = block.draw.shape[0]
    chain = np.full(rows * quantity_count, block.chain, dtype=np.int64)
    draw = np.repeat(block.draw, quantity_count)
    quantity = np.tile(np.arange(quantity_count, dtype=np.int32), rows)
    return chain, draw, quantity


def thinned_length(stored_rows: int, thin: int) -> int:
    """Rows left of a stored chain after keeping every ``thin``-th, starting with the first."""
    return len(range(0, stored_rows, thin))
