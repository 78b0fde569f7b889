"""Splitting chains in half and flagging quantities whose diagnostics are undefined.

Internally every diagnostic works on a batch of quantities at once, shaped
``(quantities, chains, draws)``, so a summary of thousands of columns is a handful of array
operations rather than a Python loop per column.
"""

from __future__ import annotations

import numpy as np

# Fewer draws than this per chain leaves halves of one draw, where no variance exists.
MIN_DRAWS_PER_CHAIN = 4


def as_batch(x: np.ndarray) -> np.ndarray:
    """View one quantity's ``(chains, draws)`` array as a batch of one; a 1-d array is one chain."""
    arr = np.asarray(x, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[np.newaxis, :]
    if arr.ndim != 2:
        raise ValueError(f"expected draws shaped (chains, draws), got shape {arr.shape}")
    return arr[np.newaxis, :, :]


def split_chains(x: np.ndarray) -> np.ndarray:
    """Split each chain into its first and second half: ``(q, m, n)`` -> ``(q, 2m, n // 2)``.

    With an odd number of draws the middle draw is dropped so the halves are equally long and
    each stays a contiguous stretch of its chain (BDA3 section 11.4).
    """
    q, m, n = x.shape
    half = n // 2
    first = x[:, :, :half]
    second = x[:, :, n - half :]
    return np.concatenate([first, second], axis=1).reshape(q, 2 * m, half)


def undefined_mask(x: np.ndarray, min_draws: int = MIN_DRAWS_PER_CHAIN) -> np.ndarray:
    """Per quantity, True where R-hat and ESS cannot be computed.

    That is: any draw not finite, too few draws per chain, or every draw of every chain the same
    value (a quantity fixed by the model's structure, such as the first diagonal element of a
    Cholesky factor of a correlation matrix, carries no information about mixing).
    """
    q, _, n = x.shape
    if n < min_draws:
        return np.ones(q, dtype=bool)
    flat = x.reshape(q, -1)
    finite = np.isfinite(flat).all(axis=1)
    with np.errstate(invalid="ignore"):
        constant = flat.max(axis=1) == flat.min(axis=1)
    return ~finite | constant


def neutralize(x: np.ndarray, bad: np.ndarray) -> np.ndarray:
    """Replace the quantities flagged ``bad`` by a harmless varying series so the arithmetic on
    the whole batch stays clean; callers overwrite their results with NaN afterwards."""
    if not bad.any():
        return x
    _, m, n = x.shape
    filler = (np.arange(m * n, dtype=np.float64) % 7.0).reshape(m, n)
    return np.where(bad[:, None, None], filler, x)
