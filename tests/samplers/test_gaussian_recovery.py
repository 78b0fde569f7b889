"""Each sampler recovers known distributions: mean, sd and 5/50/95% quantiles within 4 MCSE.

Truth comes from scipy.stats (norm for the Gaussian marginals, loggamma for the skewed case).
The marginal of component i of N(m, S) is N(m_i, S_ii) (common practice). MCSEs are batch means
(tests/samplers/batch_means.py), four chains per case, fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.samplers.batch_means import batch_means_se, compare_with
from tests.samplers.multichain import run_chains
from tests.samplers.targets import Gaussian, IndependentGaussian, LogGamma
from worker.samplers import SamplerSettings


def correlated_five() -> Gaussian:
    """5-d normal, sds 0.5..8 and AR-style correlation 0.5^|i-j| (an invented test case)."""
    sd = np.array([0.5, 1.0, 2.0, 4.0, 8.0])
    lags = np.abs(np.subtract.outer(np.arange(5), np.arange(5)))
    return Gaussian(np.array([-1.0, 0.0, 1.0, 2.0, 3.0]), np.outer(sd, sd) * 0.5**lags)


def settings_for(method: str, metric: str = "per_coordinate") -> SamplerSettings:
    if method == "metropolis":
        # Random-walk chains mix slowly (integrated autocorrelation time grows with d), so they
        # get more draws for the same quality of check.
        return SamplerSettings(
            method=method, preconditioning=metric, warmup_iterations=2000, draws=8000
        )
    return SamplerSettings(
        method=method, preconditioning=metric, warmup_iterations=1000, draws=1000
    )


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_one_dimensional_normal(method: str) -> None:
    target = IndependentGaussian(np.array([1.5]), np.array([2.0]))
    draws, _ = run_chains(target, settings_for(method), seed=101)
    failures = compare_with(draws[:, :, 0], stats.norm(1.5, 2.0), f"{method} N(1.5, 2^2)")
    assert not failures, failures


@pytest.mark.parametrize(
    ("method", "metric"),
    [("nuts", "per_coordinate"), ("nuts", "full"), ("hmc", "full"), ("metropolis", "full")],
)
def test_correlated_five_dimensional_normal(method: str, metric: str) -> None:
    target = correlated_five()
    draws, _ = run_chains(target, settings_for(method, metric), seed=202)
    failures = []
    for i in range(5):
        truth = stats.norm(target.mean[i], np.sqrt(target.covariance[i, i]))
        failures += compare_with(draws[:, :, i], truth, f"{method}/{metric} x[{i + 1}]")
    assert not failures, failures


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_skewed_log_gamma(method: str) -> None:
    """log of a Gamma(2, 1) variable: scipy.stats.loggamma(2) gives its moments and quantiles."""
    draws, _ = run_chains(LogGamma(2.0), settings_for(method), seed=303)
    failures = compare_with(draws[:, :, 0], stats.loggamma(2.0), f"{method} loggamma(2)")
    assert not failures, failures


def test_dense_sample_covariance_matches() -> None:
    """Cross-moments too: every entry of the 5-d covariance within 4 MCSE (NUTS, dense metric)."""
    target = correlated_five()
    draws, _ = run_chains(target, settings_for("nuts", "full"), seed=404)
    failures = []
    centred = draws - target.mean
    for i in range(5):
        for j in range(i + 1):
            products = centred[:, :, i] * centred[:, :, j]
            se = batch_means_se(products)
            if abs(products.mean() - target.covariance[i, j]) > 4 * se:
                failures.append((i, j, products.mean(), target.covariance[i, j], se))
    assert not failures, failures
