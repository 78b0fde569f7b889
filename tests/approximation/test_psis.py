"""PSIS against scipy.stats.genpareto and the published facts of Vehtari, Simpson, Gelman, Yao &
Gabry (2024), "Pareto smoothed importance sampling", JMLR 25 (section numbers from memory)."""

import numpy as np
import pytest
from scipy import stats

from worker.approximation import psis


def test_tail_length_and_thresholds_follow_the_paper():
    """PSIS 2024, section 3: M = min(0.2 S, 3 sqrt(S)); k-hat thresholds 0.5 and 0.7 and the
    sample-size-dependent min(1 - 1/log10(S), 0.7)."""
    assert psis.tail_length(100) == 20          # 0.2 S = 20 < 3 sqrt(S) = 30
    assert psis.tail_length(4000) == 190        # 3 sqrt(4000) = 189.7, rounded up
    assert psis.k_threshold(100) == pytest.approx(0.5)
    assert psis.k_threshold(1000) == pytest.approx(1 - 1 / 3)
    assert psis.k_threshold(100_000) == pytest.approx(0.7)
    assert psis.reliability(0.3, 4000) == "good"
    assert psis.reliability(0.6, 4000) == "ok"
    assert psis.reliability(0.6, 100) == "unreliable"   # below 0.7 but above 1 - 1/log10(100)
    assert psis.reliability(float("nan"), 4000) == "unknown"


@pytest.mark.parametrize("shape", [0.2, 0.5, 0.8])
def test_shape_estimate_is_unbiased_on_known_shape_samples(shape):
    """Samples from scipy.stats.genpareto with a known shape: over 200 samples of n = 1000 the
    mean k-hat is within 0.015 of the truth. Power: the sd of one estimate is about 0.05 (asymptotic
    sd (1 + k) / sqrt(n) of the likelihood estimator, Smith 1985, from memory), so the mean of 200
    has sd 0.0035 and 0.015 is four of them; the prior's pull toward 0.5 is 10/1010 of the gap,
    at most 0.003."""
    rng = np.random.default_rng(20240)
    x = np.sort(stats.genpareto.rvs(shape, scale=2.0, size=(200, 1000), random_state=rng), axis=-1)
    fit = psis.fit_generalized_pareto(x)
    assert np.mean(fit.k) == pytest.approx(shape, abs=0.015)
    assert np.median(fit.sigma) == pytest.approx(2.0, rel=0.03)


def test_shape_estimate_agrees_with_scipy_maximum_likelihood():
    """On each of 20 samples (n = 1000, k = 0.5) the Zhang & Stephens (2009) estimate is within
    0.01 of scipy.stats.genpareto.fit's maximum-likelihood shape (both are efficient estimators of
    the same parameter; their difference is far below the sampling sd of 0.05)."""
    rng = np.random.default_rng(7)
    for _ in range(20):
        x = np.sort(stats.genpareto.rvs(0.5, scale=1.0, size=1000, random_state=rng))
        fit = psis.fit_generalized_pareto(x[None, :])
        mle_shape, _, _ = stats.genpareto.fit(x, floc=0)
        assert fit.k[0] == pytest.approx(mle_shape, abs=0.01)


@pytest.mark.parametrize(("proposal_sd", "tolerance"), [(0.9, 0.05), (0.8, 0.05)])
def test_k_hat_of_a_too_narrow_normal_proposal(proposal_sd, tolerance):
    """Target N(0, 1), proposal N(0, s^2) with s < 1: the ratio exp(x^2 (1/s^2 - 1) / 2) has
    P(r > t) ~ t^(-1 / (1 - s^2)), a Pareto tail with k = 1 - s^2 (derived here; PSIS 2024 uses
    this example in its section 4, from memory). Mean k-hat over 20 runs of S = 10,000; the sd of
    one k-hat is about 0.06 (M = 300), so the mean's sd is 0.013 and the tolerance is about
    four of them."""
    rng = np.random.default_rng(11)
    x = rng.normal(0.0, proposal_sd, size=(20, 10_000))
    log_ratios = stats.norm.logpdf(x) - stats.norm.logpdf(x, 0.0, proposal_sd)
    smoothed = psis.smooth(log_ratios)
    assert np.mean(smoothed.k_hat) == pytest.approx(1 - proposal_sd ** 2, abs=tolerance)


def test_smoothed_weights_give_the_target_moments():
    """Target N(0, 1), proposal N(0, 1.5^2) (k about 0, a light tail): the self-normalised PSIS
    estimate of E[x^2] = 1 is within 0.05 (the estimate's sd with S = 20,000 and an effective
    size above 10,000 is below 0.015)."""
    rng = np.random.default_rng(5)
    x = rng.normal(0.0, 1.5, size=20_000)
    smoothed = psis.smooth(stats.norm.logpdf(x) - stats.norm.logpdf(x, 0.0, 1.5))
    weights = np.exp(smoothed.log_weights)
    assert weights.sum() == pytest.approx(1.0)
    assert np.sum(weights * x ** 2) == pytest.approx(1.0, abs=0.05)
    assert smoothed.effective_draws > 10_000
    assert smoothed.k_hat < psis.GOOD_K


def test_only_the_tail_is_changed_and_never_raised_above_the_largest_ratio():
    """PSIS 2024, section 3: the M largest ratios are replaced, truncated at the largest raw one;
    the others keep their relative sizes."""
    rng = np.random.default_rng(9)
    log_r = rng.standard_t(3, size=4000)
    smoothed = psis.smooth(log_r)
    m = psis.tail_length(4000)
    order = np.argsort(log_r)
    body = order[: 4000 - m]
    shift = smoothed.log_weights[body] - log_r[body]
    assert np.allclose(shift, shift[0])
    assert np.max(smoothed.log_weights - shift[0]) <= np.max(log_r) + 1e-12


def test_equal_ratios_have_no_tail_to_fit():
    """Identical ratios (proposal = target): uniform weights, k-hat reported as unknown (NaN)."""
    smoothed = psis.smooth(np.zeros(1000))
    assert np.isnan(smoothed.k_hat)
    assert np.allclose(np.exp(smoothed.log_weights), 1e-3)
    assert smoothed.effective_draws == pytest.approx(1000)


def test_a_row_without_any_usable_ratio_has_no_weight():
    """Every ratio zero (log -inf) or undefined (NaN): no weights, no effective draws, no k-hat;
    the other rows are untouched."""
    rows = np.zeros((3, 500))
    rows[0] = -np.inf
    rows[1] = np.nan
    smoothed = psis.smooth(rows)
    assert np.all(np.isneginf(smoothed.log_weights[:2]))
    assert list(smoothed.effective_draws[:2]) == [0.0, 0.0]
    assert np.allclose(np.exp(smoothed.log_weights[2]), 1 / 500)
