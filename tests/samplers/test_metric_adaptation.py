"""The cold-start warm-up schedule, its discounted covariance and its shrinkage
(worker/samplers/metric_adaptation.py).

External references: numpy.cov with ``aweights`` for the weighted covariance; Kish's effective
sample size (sum w)^2 / sum w^2 (common practice); the true scales of independent Gaussians.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import IndependentGaussian
from worker.samplers import Chain, SamplerSettings
from worker.samplers.metric_adaptation import (
    FIXED_CORRELATIONS_AFTER,
    GROWTH,
    MINIMUM_BLOCK,
    OLDER_WEIGHT,
    SHAPING_END_FRACTION,
    DiscountedCovariance,
    shrunk,
    warmup_schedule,
)


def test_the_default_schedule() -> None:
    schedule = warmup_schedule(1000)
    assert schedule.approach_end == 10
    assert schedule.refits == (20, 42, 87, 183, 383, 800)
    assert schedule.polish_start == 800
    assert warmup_schedule(200).refits == (20, 40, 80, 160)


@pytest.mark.parametrize("warmup", [25, 40, 100, 150, 200, 333, 1000, 2000, 5000, 20000])
def test_stage_boundaries_follow_the_documented_rule(warmup: int) -> None:
    schedule = warmup_schedule(warmup)
    refits = schedule.refits
    assert schedule.approach_end == max(10, int(0.01 * warmup))
    assert refits[0] - schedule.approach_end == MINIMUM_BLOCK
    assert refits[-1] == int(SHAPING_END_FRACTION * warmup) == schedule.polish_start
    assert all(a < b for a, b in zip(refits, refits[1:], strict=False))
    # a geometric progression with a ratio near GROWTH (the nearest whole number of steps)
    if len(refits) > 2:
        ratios = np.array(refits[1:]) / np.array(refits[:-1])
        assert np.all(ratios > GROWTH / 1.5) and np.all(ratios < GROWTH * 1.5)
    collected = [i for i in range(warmup) if schedule.collects(i)]
    assert collected == list(range(schedule.approach_end, schedule.polish_start))


def test_short_warmups_adapt_the_step_size_only() -> None:
    assert warmup_schedule(24).refits == ()
    assert not any(warmup_schedule(24).collects(i) for i in range(24))
    assert warmup_schedule(0).refits == ()
    assert warmup_schedule(25).refits == (20,)


@pytest.mark.parametrize("dense", [False, True])
def test_the_estimate_is_numpy_cov_with_weights(dense: bool) -> None:
    rng = np.random.default_rng(11)
    first = rng.normal([1.0, -2.0, 0.5, 3.0], [1.0, 0.1, 4.0, 2.0], size=(17, 4))
    second = rng.normal(0.0, [2.0, 0.3, 1.0, 1.0], size=(29, 4))
    estimator = DiscountedCovariance(4, dense)
    for x in first:
        estimator.add(x)
    estimator.advance()
    for x in second:
        estimator.add(x)
    covariance, effective = estimator.estimate()
    weights = np.r_[np.full(17, OLDER_WEIGHT), np.ones(29)]
    expected = np.cov(np.vstack([first, second]).T, aweights=weights)
    np.testing.assert_allclose(covariance, expected if dense else np.diag(expected), rtol=1e-12)
    assert effective == pytest.approx(weights.sum() ** 2 / (weights**2).sum(), rel=1e-14)
    # at the next block the first is forgotten: only the second, now at OLDER_WEIGHT
    estimator.advance()
    third = rng.normal(size=(5, 4))
    for x in third:
        estimator.add(x)
    covariance, _ = estimator.estimate()
    weights = np.r_[np.full(29, OLDER_WEIGHT), np.ones(5)]
    expected = np.cov(np.vstack([second, third]).T, aweights=weights)
    np.testing.assert_allclose(covariance, expected if dense else np.diag(expected), rtol=1e-12)
    # a block not kept leaves only the new one, at weight 1 (plain numpy.cov)
    estimator.advance(keep=False)
    for x in first:
        estimator.add(x)
    covariance, effective = estimator.estimate()
    expected = np.cov(first.T)
    np.testing.assert_allclose(covariance, expected if dense else np.diag(expected), rtol=1e-12)
    assert effective == 17


def test_an_estimate_needs_two_draws() -> None:
    estimator = DiscountedCovariance(3, False)
    assert estimator.estimate() is None
    estimator.add(np.ones(3))
    assert estimator.estimate() is None


def test_variances_shrink_on_the_log_scale_toward_their_own_target() -> None:
    """Variances over eight decades stay within the shrinkage's log-linear pull of themselves:
    log v = (n log v_hat + c log t) / (n + c). Pulling toward the average variance would put the
    smallest one near 1e3, off by seven decades."""
    estimate = np.logspace(-4, 4, 9)
    target = np.ones(9)
    result = shrunk(estimate, 50.0, target, variance_count=5.0)
    expected = np.exp((50 * np.log(estimate) + 5 * np.log(target)) / 55)
    np.testing.assert_allclose(result, expected, rtol=1e-12)
    assert np.all(np.abs(np.log10(result / estimate)) <= 4 * 5 / 55 + 1e-12)
    # a coordinate that did not move keeps the target's variance
    stuck = estimate.copy()
    stuck[3] = 0.0
    assert shrunk(stuck, 50.0, np.full(9, 2.0))[3] == 2.0


def test_a_dense_estimate_from_fewer_draws_than_coordinates_is_a_valid_metric() -> None:
    rng = np.random.default_rng(12)
    draws = rng.normal(size=(6, 20)) * np.linspace(0.1, 10.0, 20)
    covariance = np.cov(draws.T)
    assert np.linalg.matrix_rank(covariance) < 20
    result = shrunk(covariance, 6.0, np.eye(20))
    np.linalg.cholesky(result)  # positive definite
    # too few draws for correlations: the result is diagonal, with the shrunk variances
    np.testing.assert_allclose(result, np.diag(np.diag(result)), atol=0.0)
    np.testing.assert_allclose(np.diag(result), shrunk(np.diag(covariance), 6.0, np.ones(20)))


def test_correlations_count_the_draws_beyond_the_threshold() -> None:
    """With n effective draws and d coordinates the correlation keeps weight m / (m + c),
    m = n - threshold x d."""
    rho = 0.8
    covariance = np.array([[4.0, rho * 2 * 0.5], [rho * 2 * 0.5, 0.25]])
    n = 2 * FIXED_CORRELATIONS_AFTER + 30.0
    result = shrunk(covariance, n, np.eye(2), correlation_count=10.0)
    weight = 30.0 / 40.0
    realised = result[0, 1] / np.sqrt(result[0, 0] * result[1, 1])
    assert realised == pytest.approx(weight * rho, rel=1e-12)


def test_warmup_finds_scales_spread_over_four_decades() -> None:
    """Independent normals with sds 0.01..100: the adapted per-coordinate scales come within a
    factor of 1.6 of the true sds, and sampling does not run to the tree-depth cap. An earlier
    shrinkage toward the average variance left the small scales off by orders of magnitude here.
    A 1000-draw warm-up's final fit rests on about 500 effective draws: log sd has a sampling sd
    of about 1/sqrt(2 x 500) = 0.03 for independent draws, so a factor 1.6 (log 0.47) leaves
    room for the chain's autocorrelation and the shrinkage's pull of about 1/500 of the log
    distance to the previous metric."""
    sd = np.logspace(-2, 2, 10)
    target = IndependentGaussian(np.zeros(10), sd)
    out = Chain(target, SamplerSettings(draws=100), np.random.SeedSequence(13)).run()
    scales = np.array(out.adapted["scales"])
    assert np.all(np.abs(np.log(scales / sd)) < np.log(1.6)), scales / sd
    assert out.stats["doublings"].max() < 10
