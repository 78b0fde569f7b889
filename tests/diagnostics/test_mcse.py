"""Monte Carlo standard errors against textbook large-sample formulas for iid draws, and against
the spread of estimates over independent replicates (the definition of a standard error).

- mean: sd / sqrt(N) (common practice);
- sd of normal draws: sigma / sqrt(2 N), from Var(s^2) = 2 sigma^4 / N for normal data and the delta
  method (common practice);
- p-quantile: sqrt(p (1 - p) / N) / f(q_p), the asymptotic sd of a sample quantile (common practice;
  the asymptotic normality of order statistics, e.g. Serfling 1980, "Approximation Theorems of
  Mathematical Statistics", section 2.3 - from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.diagnostics.series import ar1
from worker.diagnostics import mean_error, quantile_error, sd_error
from worker.diagnostics.mcse import mean_error_batch, quantile_error_batch, sd_error_batch

REPLICATES = 100
CHAINS = 4
DRAWS = 1000
N = CHAINS * DRAWS


def _mean_within_4_se(estimates: np.ndarray, expected: float, slack: float = 0.02) -> bool:
    """Mean of the replicate estimates within 4 standard errors (plus a 2% allowance for the
    estimators' finite-sample bias, seen in replication at these sizes) of the expected value."""
    standard_error = estimates.std(ddof=1) / np.sqrt(estimates.size)
    return abs(estimates.mean() - expected) < 4.0 * standard_error + slack * expected


@pytest.fixture(scope="module")
def iid_normal() -> np.ndarray:
    return np.random.default_rng(20261201).standard_normal((REPLICATES, CHAINS, DRAWS)) * 2.0


def test_mcse_of_mean_of_iid_normal_is_sd_over_root_n(iid_normal: np.ndarray) -> None:
    assert _mean_within_4_se(mean_error_batch(iid_normal), 2.0 / np.sqrt(N))
    assert abs(mean_error(iid_normal[0]) - 2.0 / np.sqrt(N)) < 0.1 * 2.0 / np.sqrt(N)


def test_mcse_of_mean_matches_spread_of_means_for_ar1() -> None:
    rng = np.random.default_rng(12)
    series = ar1(rng, 0.7, (400, CHAINS, DRAWS))
    spread = series.mean(axis=(1, 2)).std(ddof=1)
    # the sd of 400 normal values has relative standard error about 1 / sqrt(2 * 399)
    assert abs(np.median(mean_error_batch(series)) - spread) < 4.0 / np.sqrt(798) * spread


def test_sd_error_of_iid_normal_is_sigma_over_root_2n(iid_normal: np.ndarray) -> None:
    expected = 2.0 / np.sqrt(2.0 * N)
    assert _mean_within_4_se(sd_error_batch(iid_normal), expected)
    assert abs(sd_error(iid_normal[0]) - expected) < 0.15 * expected


@pytest.mark.parametrize("p", [0.05, 0.5, 0.95])
def test_mcse_of_quantile_of_iid_normal_matches_order_statistic_formula(
    iid_normal: np.ndarray, p: float
) -> None:
    sigma = 2.0
    density = stats.norm.pdf(stats.norm.ppf(p, scale=sigma), scale=sigma)
    expected = np.sqrt(p * (1.0 - p) / N) / density
    assert _mean_within_4_se(quantile_error_batch(iid_normal, p), expected)
    # and the actual spread of the sample quantile over replicates agrees with the formula within
    # the relative standard error of an sd of 100 values, 1 / sqrt(2 * 99)
    spread = np.quantile(iid_normal.reshape(REPLICATES, -1), p, axis=1).std(ddof=1)
    assert abs(spread - expected) < 4.0 / np.sqrt(198) * expected
    assert np.isfinite(quantile_error(iid_normal[0], p))


def test_mcse_of_quantile_of_exponential_draws_matches_formula() -> None:
    """A skewed case: Exp(1), p = 0.9, where f(q_p) = 1 - p (scipy.stats.expon)."""
    rng = np.random.default_rng(13)
    draws = rng.exponential(size=(REPLICATES, CHAINS, DRAWS))
    p = 0.9
    expected = np.sqrt(p * (1.0 - p) / N) / stats.expon.pdf(stats.expon.ppf(p))
    assert _mean_within_4_se(quantile_error_batch(draws, p), expected)


def test_mcse_of_undefined_inputs_is_nan() -> None:
    draws = np.full((4, 50), 1.0)
    assert np.isnan(mean_error(draws))
    assert np.isnan(quantile_error(draws, 0.5))
