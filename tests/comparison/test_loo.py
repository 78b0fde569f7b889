"""PSIS-LOO against exact leave-one-out, computed by refitting a conjugate model in closed form.

The model (BDA3, Gelman et al. 2013, section 2.5): y_i ~ N(mu, sigma^2) with sigma known and
mu ~ N(m0, t0^2). The posterior given any subset of the data is normal with precision
1/t0^2 + n/sigma^2 and the precision-weighted mean, and the predictive density of a new y is
N(mean, sigma^2 + posterior variance). Exact elpd_loo is then the sum over i of the predictive
log density of y_i given the other n - 1 observations; lppd_i uses the full posterior.
Methods: Vehtari, Gelman & Gabry (2017), Statistics and Computing 27.
"""

import numpy as np
import pytest
from scipy import stats

from worker.comparison.loo import psis_loo
from worker.comparison.ranking import compare

SIGMA = 1.0
PRIOR_LOCATION, PRIOR_SCALE = 0.0, 10.0


def posterior(y: np.ndarray, sigma: float = SIGMA) -> tuple[float, float]:
    precision = 1 / PRIOR_SCALE ** 2 + y.size / sigma ** 2
    mean = (PRIOR_LOCATION / PRIOR_SCALE ** 2 + y.sum() / sigma ** 2) / precision
    return mean, 1 / np.sqrt(precision)


def exact_loo(y: np.ndarray, sigma: float = SIGMA) -> np.ndarray:
    out = np.empty(y.size)
    for i in range(y.size):
        mean, sd = posterior(np.delete(y, i), sigma)
        out[i] = stats.norm.logpdf(y[i], mean, np.sqrt(sigma ** 2 + sd ** 2))
    return out


def exact_lppd(y: np.ndarray, sigma: float = SIGMA) -> np.ndarray:
    mean, sd = posterior(y, sigma)
    return stats.norm.logpdf(y, mean, np.sqrt(sigma ** 2 + sd ** 2))


def pointwise_chains(y, rng, sigma=SIGMA, chains=4, draws=1000):
    """Exact posterior draws of mu, split into chains, and their pointwise log likelihoods."""
    mean, sd = posterior(y, sigma)
    mu = rng.normal(mean, sd, size=(chains, draws))
    return [stats.norm.logpdf(y[None, :], m[:, None], sigma) for m in mu]


def test_elpd_matches_exact_leave_one_out():
    """n = 30: the PSIS-LOO total is within its stated standard error of the exact value, and
    much closer than that (0.05: the Monte Carlo error with 4000 exact draws and k-hat below 0.5
    is of order 0.01 here); p_loo within 0.05 of the exact lppd - elpd_loo (about 1, the one
    parameter)."""
    rng = np.random.default_rng(2017)
    y = rng.normal(1.5, SIGMA, size=30)
    result = psis_loo(pointwise_chains(y, rng))
    exact = exact_loo(y)
    assert abs(result.elpd_loo - exact.sum()) < result.elpd_loo_se
    assert result.elpd_loo == pytest.approx(exact.sum(), abs=0.05)
    assert np.allclose(result.pointwise_elpd, exact, atol=0.01)
    assert result.p_loo == pytest.approx((exact_lppd(y) - exact).sum(), abs=0.05)
    assert result.elpd_loo_se == pytest.approx(np.sqrt(30 * np.var(exact, ddof=1)), rel=0.01)
    assert np.all(result.k_hat < 0.5)
    assert result.flagged() == []
    assert result.draws == 4000


def test_an_outlier_is_flagged_by_k_hat():
    """n = 20 from N(0, 1) and one observation placed at 12 (twelve sigma): its leave-one-out
    ratios have a heavy tail, so its k-hat is above the 0.7 threshold (VGG 2017, section 2.1),
    while the other rows stay below 0.5."""
    rng = np.random.default_rng(4)
    y = rng.normal(0.0, SIGMA, size=20)
    y[7] = 12.0
    result = psis_loo(pointwise_chains(y, rng))
    assert result.flagged() == [7]
    assert result.k_hat[7] > 0.7
    assert np.all(np.delete(result.k_hat, 7) < 0.5)
    assert result.k_counts()["unreliable"] == 1


def test_blocks_and_chains_do_not_change_the_answer():
    """The streamed computation equals the same draws given as one chain (more observations than
    one block, so several blocks are used)."""
    rng = np.random.default_rng(8)
    y = rng.normal(0.0, SIGMA, size=150)
    chains = pointwise_chains(y, rng)
    split = psis_loo(chains)
    whole = psis_loo([np.concatenate(chains)])
    assert np.array_equal(split.pointwise_elpd, whole.pointwise_elpd)
    assert split.elpd_loo == whole.elpd_loo


def test_non_finite_log_likelihood_is_refused():
    chains = [np.zeros((100, 3))]
    chains[0][5, 1] = -np.inf
    with pytest.raises(ValueError, match="not finite"):
        psis_loo(chains)


def test_comparison_orders_fits_and_pairs_the_differences():
    """Data from N(0, 1); fit A knows sigma = 1, fit B wrongly uses sigma = 2. The better fit comes
    first; the PSIS difference is within its paired standard error of the exact leave-one-out
    difference; and the paired SE is smaller than the two fits' SEs combined as if independent
    (VGG 2017, section 5.2, from memory: pairing removes the shared variation)."""
    rng = np.random.default_rng(52)
    y = rng.normal(0.0, 1.0, size=200)
    right = psis_loo(pointwise_chains(y, rng, sigma=1.0))
    wrong = psis_loo(pointwise_chains(y, rng, sigma=2.0))
    comparison = compare({"sigma_two": wrong, "sigma_one": right})
    first, second = comparison.ranked
    assert first.name == "sigma_one" and first.elpd_difference == 0.0
    exact_difference = exact_loo(y, 2.0).sum() - exact_loo(y, 1.0).sum()
    assert second.elpd_difference < 0
    assert abs(second.elpd_difference - exact_difference) < second.difference_se
    assert second.difference_se < np.hypot(right.elpd_loo_se, wrong.elpd_loo_se)
    assert any("qualified review" in c for c in comparison.cautions)


def test_close_fits_carry_a_caution():
    """Two fits of one model from different draws: the difference is within two SEs, said so."""
    rng = np.random.default_rng(3)
    y = rng.normal(0.0, 1.0, size=40)
    a = psis_loo(pointwise_chains(y, rng))
    b = psis_loo(pointwise_chains(y, rng))
    comparison = compare({"a": a, "b": b})
    assert any("do not separate them" in c for c in comparison.cautions)
    assert any("only 40 observations" in c for c in comparison.cautions)


def test_fits_on_different_data_are_not_compared():
    rng = np.random.default_rng(1)
    a = psis_loo(pointwise_chains(rng.normal(size=10), rng))
    b = psis_loo(pointwise_chains(rng.normal(size=12), rng))
    with pytest.raises(ValueError, match="not fitted to the same data"):
        compare({"a": a, "b": b})
