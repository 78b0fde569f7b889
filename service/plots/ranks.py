"""Rank histograms per chain (Vehtari, Gelman, Simpson, Carpenter & Buerkner 2021, sec. 4.2).

All draws of one quantity are ranked together over every chain; if the chains explore the same
distribution, each chain's ranks are spread uniformly over 1..S, so its histogram is flat.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

# Coverage of the band drawn around the flat line: wide enough that a healthy chain rarely
# leaves it in any of about twenty bins.
BAND_COVERAGE = 0.99


@dataclass(frozen=True)
class RankHistograms:
    counts: np.ndarray      # (chains, bins): how many of each chain's draws fall in each rank bin
    edges: np.ndarray       # (bins + 1,): rank bin edges on the scale 0..S
    expected: float         # count per bin if ranks were uniform
    band: tuple[float, float]  # central BAND_COVERAGE interval of one bin's count under uniformity


def rank_histograms(x: np.ndarray, bins: int = 20) -> RankHistograms:
    """Histograms of pooled ranks, one per chain; ``x`` is ``(chains, draws)``.

    Ties (a discrete quantity) share their average rank, as in the paper's rank normalisation.
    """
    chains, draws = x.shape
    total = chains * draws
    bins = max(1, min(bins, draws))
    ranks = stats.rankdata(x.reshape(-1), method="average").reshape(chains, draws)
    # Bin b holds ranks in ((b / bins) * S, ((b + 1) / bins) * S]; a rank of exactly S lands in
    # the last bin.
    index = np.minimum(np.ceil(ranks * bins / total).astype(np.int64) - 1, bins - 1)
    index = np.maximum(index, 0)
    offsets = (np.arange(chains) * bins)[:, np.newaxis]
    counts = np.bincount((index + offsets).reshape(-1), minlength=chains * bins)
    counts = counts.reshape(chains, bins)
    # Under uniform ranks one chain's count in one bin is close to Binomial(draws, 1 / bins)
    # (exact for independent draws from one continuous distribution with many chains).
    low, high = stats.binom.interval(BAND_COVERAGE, draws, 1.0 / bins)
    edges = np.linspace(0.0, float(total), bins + 1)
    return RankHistograms(counts, edges, draws / bins, (float(low), float(high)))
