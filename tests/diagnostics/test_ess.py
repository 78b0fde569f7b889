"""Effective sample size against known autocorrelation times.

Source for the expected values: for a stationary AR(1) series x_t = rho x_{t-1} + e_t the
integrated autocorrelation time is (1 + rho) / (1 - rho), so N draws carry N (1 - rho) / (1 + rho)
effective draws (common practice; ../shared/REFERENCES.md "Facts of the trade"). For iid draws the
indicator series behind tail-ESS are iid too, whatever the tails, so tail-ESS ~ N (Vehtari et al.
2021, section 4.3, the definition of tail-ESS).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.diagnostics.series import ar1
from worker.diagnostics import bulk_ess, ess, tail_ess
from worker.diagnostics.ess import bulk_ess_batch, ess_batch, tail_ess_batch

REPLICATES = 60
CHAINS = 4
DRAWS = 1000
# The Geyer (1992) truncated estimator has a small finite-sample bias (truncation and the
# estimated mean); replication at these sizes showed it below 3%, so we allow that on top of
# four standard errors of the replication mean.
BIAS_ALLOWANCE = 0.03


@pytest.mark.parametrize("rho", [-0.3, 0.0, 0.5, 0.9])
def test_ess_of_ar1_matches_theory(rho: float) -> None:
    rng = np.random.default_rng(20261201)
    series = ar1(rng, rho, (REPLICATES, CHAINS, DRAWS))
    estimates = ess_batch(series)
    expected = CHAINS * DRAWS * (1.0 - rho) / (1.0 + rho)
    standard_error = estimates.std(ddof=1) / np.sqrt(REPLICATES)
    tolerance = 4.0 * standard_error + BIAS_ALLOWANCE * expected
    assert abs(estimates.mean() - expected) < tolerance, (estimates.mean(), expected, tolerance)


@pytest.mark.parametrize("rho", [0.0, 0.7])
def test_bulk_ess_of_ar1_matches_theory(rho: float) -> None:
    """Ranks of a Gaussian AR(1) series are nearly the series itself (a monotone map), so bulk-ESS
    should agree with N (1 - rho) / (1 + rho) as well (common practice; Vehtari et al. 2021)."""
    rng = np.random.default_rng(7)
    estimates = bulk_ess_batch(ar1(rng, rho, (REPLICATES, CHAINS, DRAWS)))
    expected = CHAINS * DRAWS * (1.0 - rho) / (1.0 + rho)
    tolerance = 4.0 * estimates.std(ddof=1) / np.sqrt(REPLICATES) + BIAS_ALLOWANCE * expected
    assert abs(estimates.mean() - expected) < tolerance


def test_ess_matches_variance_of_chain_means_across_replicates() -> None:
    """The ESS is defined by Var(mean) = sigma^2 / ESS (BDA3 section 11.5); check the estimate
    against the spread of the means of independent replicates, for an AR(1) with rho = 0.8."""
    rng = np.random.default_rng(11)
    rho = 0.8
    series = ar1(rng, rho, (400, CHAINS, DRAWS))
    stationary_var = 1.0 / (1.0 - rho**2)
    empirical_ess = stationary_var / series.mean(axis=(1, 2)).var(ddof=1)
    # the variance of a sample variance of 400 normal values has relative sd sqrt(2 / 399)
    tolerance = 4.0 * np.sqrt(2.0 / 399.0) * empirical_ess
    assert abs(np.median(ess_batch(series)) - empirical_ess) < tolerance


def test_tail_ess_of_heavy_tailed_iid_draws_is_near_n() -> None:
    """Cauchy draws have no mean or variance, yet their quantile indicators are iid Bernoulli, so
    tail-ESS ~ N and bulk-ESS ~ N (rank normalisation removes the tails)."""
    rng = np.random.default_rng(3)
    draws = rng.standard_cauchy((REPLICATES, CHAINS, DRAWS))
    total = CHAINS * DRAWS
    for estimates in (tail_ess_batch(draws), bulk_ess_batch(draws)):
        tolerance = 4.0 * estimates.std(ddof=1) / np.sqrt(REPLICATES) + BIAS_ALLOWANCE * total
        assert abs(estimates.mean() - total) < tolerance


def test_tail_ess_sees_chains_that_disagree_only_in_scale() -> None:
    """Chains that agree in the bulk but not in the tails have a low tail-ESS while bulk-ESS looks
    fine (the purpose of tail-ESS, Vehtari et al. 2021 section 4.3): three chains N(0, 1), one
    N(0, 3^2)."""
    rng = np.random.default_rng(5)
    draws = rng.standard_normal((CHAINS, DRAWS)) * np.array([[1.0], [1.0], [1.0], [3.0]])
    assert bulk_ess(draws) > 0.5 * CHAINS * DRAWS
    assert tail_ess(draws) < 0.1 * bulk_ess(draws)


def test_undefined_cases_give_nan_without_warnings_or_errors() -> None:
    rng = np.random.default_rng(9)
    constant = np.full((4, 100), 2.5)
    few = rng.standard_normal((4, 3))
    with_nan = rng.standard_normal((4, 100))
    with_nan[2, 17] = np.nan
    with np.errstate(all="raise"):
        for draws in (constant, few, with_nan):
            assert np.isnan(ess(draws))
            assert np.isnan(bulk_ess(draws))
            assert np.isnan(tail_ess(draws))


def test_single_chain_is_split_and_gives_an_estimate() -> None:
    rng = np.random.default_rng(10)
    draws = ar1(rng, 0.5, (1, 4000))
    value = ess(draws[0])  # a 1-d array is one chain
    assert 4000 / 3 * 0.75 < value < 4000 / 3 * 1.25
