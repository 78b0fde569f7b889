"""Rank normalisation and folding (Vehtari, Gelman, Simpson, Carpenter & Buerkner 2021, sec. 4)."""

from __future__ import annotations

import numpy as np
from scipy import special, stats

# Blom's (1958) offset for normal scores: Phi^-1((r - 3/8) / (S + 1/4)), as the paper uses.
BLOM_OFFSET = 3.0 / 8.0


def rank_normalize(x: np.ndarray) -> np.ndarray:
    """Replace the draws of each quantity by normal scores of their ranks pooled over all chains.

    ``x`` is ``(quantities, chains, draws)``; ties share their average rank, so a chain stuck on
    one value keeps a single score.
    """
    q, m, n = x.shape
    flat = x.reshape(q, m * n)
    ranks = stats.rankdata(flat, method="average", axis=1)
    size = m * n
    scores = special.ndtri((ranks - BLOM_OFFSET) / (size - 2.0 * BLOM_OFFSET + 1.0))
    return scores.reshape(q, m, n)


def fold(x: np.ndarray) -> np.ndarray:
    """Absolute deviation from the pooled median, which turns differences in scale into location."""
    q = x.shape[0]
    median = np.median(x.reshape(q, -1), axis=1)
    return np.abs(x - median[:, np.newaxis, np.newaxis])
