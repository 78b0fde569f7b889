"""Rank histograms per chain, as Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021) describe
them ("Rank-normalization, folding, and localization: an improved R-hat", Bayesian Analysis
16(2), sec. 4.2 "rank plots", from memory): all draws ranked together, one histogram per chain,
flat when the chains agree.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from service.plots.ranks import BAND_COVERAGE, rank_histograms


def test_hand_counted_ranks() -> None:
    # Two chains of 20 draws whose pooled ranks are 1..20 and 21..40; four bins of ten ranks each.
    x = np.stack([np.arange(1.0, 21.0), np.arange(21.0, 41.0)])
    result = rank_histograms(x, bins=4)
    np.testing.assert_array_equal(result.counts, [[10, 10, 0, 0], [0, 0, 10, 10]])
    np.testing.assert_allclose(result.edges, [0, 10, 20, 30, 40])
    assert result.expected == 5.0


def test_band_is_the_binomial_interval() -> None:
    # Under uniform ranks one bin's count for one chain is about Binomial(draws, 1/bins).
    result = rank_histograms(np.random.default_rng(1).normal(size=(4, 500)), bins=20)
    assert result.band == tuple(float(v) for v in stats.binom.interval(BAND_COVERAGE, 500, 0.05))


def test_agreeing_chains_give_flat_histograms() -> None:
    """Independent draws from one distribution: counts pass a chi-square test of uniformity.

    Pearson's chi-square test over all chains x bins cells (scipy.stats.chisquare); with a fixed
    seed the p-value is well away from the 0.001 rejection level.
    """
    x = np.random.default_rng(20261201).normal(size=(4, 1000))
    result = rank_histograms(x, bins=20)
    assert result.counts.sum(axis=1).tolist() == [1000] * 4
    assert stats.chisquare(result.counts.reshape(-1)).pvalue > 0.001


def test_a_shifted_chain_shows_up() -> None:
    # One chain centred one standard deviation higher: its low-rank bins are nearly empty.
    rng = np.random.default_rng(7)
    x = rng.normal(size=(4, 1000))
    x[2] += 1.0
    result = rank_histograms(x, bins=20)
    assert result.counts[2, :5].sum() < result.band[0] * 5
    assert stats.chisquare(result.counts.reshape(-1)).pvalue < 1e-6


def test_ties_share_a_rank_and_all_draws_are_counted() -> None:
    x = np.random.default_rng(3).integers(0, 3, size=(3, 200)).astype(float)
    result = rank_histograms(x, bins=10)
    assert result.counts.sum() == 600
    assert result.counts.shape == (3, 10)
