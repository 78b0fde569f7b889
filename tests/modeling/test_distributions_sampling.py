"""Posterior predictive draws: shapes, and moments and quantiles against scipy.stats.

Each check allows 5 Monte Carlo standard errors with a fixed seed: the mean within
5 sqrt(var / n) of scipy's mean where the variance is finite, and the fraction of draws at or below
scipy's 10%, 50% and 90% quantiles within 5 sqrt(p (1 - p) / n) of scipy's cdf there (binomial
standard error of a proportion, common practice). The LKJ marginal of each correlation is
Beta(eta - 1 + K/2, eta - 1 + K/2) on (-1, 1) (Lewandowski, Kurowicka & Joe 2009, section 3.2,
from memory); the ordered logistic probabilities follow McCullagh (1980).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats as st
from scipy.special import expit, softmax

from worker.modeling.distributions import find_distribution

N = 20_000
Z = 5.0


class FoldedT:
    """|T| * scale for T ~ Student-t: cdf 2 F(q / scale) - 1 on q >= 0 (scipy.stats.t)."""

    def __init__(self, df: float, scale: float) -> None:
        self.t = st.t(df, scale=scale)

    def cdf(self, q):
        return 2.0 * self.t.cdf(q) - 1.0

    def ppf(self, p):
        return self.t.ppf(0.5 + 0.5 * np.asarray(p))


SCALAR_CASES = [
    ("normal", {"location": 1.5, "scale": 2.0}, st.norm(1.5, 2.0)),
    ("student_t", {"degrees_of_freedom": 5.0, "location": -1.0, "scale": 0.5},
     st.t(5.0, -1.0, 0.5)),
    ("cauchy", {"location": 0.5, "scale": 1.5}, st.cauchy(0.5, 1.5)),
    ("laplace", {"location": 0.5, "scale": 1.5}, st.laplace(0.5, 1.5)),
    ("logistic", {"location": 0.5, "scale": 1.5}, st.logistic(0.5, 1.5)),
    ("lognormal", {"log_location": 0.3, "log_scale": 0.6}, st.lognorm(0.6, scale=np.exp(0.3))),
    ("exponential", {"rate": 2.5}, st.expon(scale=0.4)),
    ("gamma", {"shape": 2.5, "rate": 1.5}, st.gamma(2.5, scale=1 / 1.5)),
    ("gamma", {"shape": 0.4, "rate": 1.5}, st.gamma(0.4, scale=1 / 1.5)),
    ("inverse_gamma", {"shape": 4.0, "scale": 2.0}, st.invgamma(4.0, scale=2.0)),
    ("weibull", {"shape": 1.7, "scale": 2.0}, st.weibull_min(1.7, scale=2.0)),
    ("beta", {"a": 2.0, "b": 0.7}, st.beta(2.0, 0.7)),
    ("uniform", {"lower": -1.0, "upper": 3.0}, st.uniform(-1.0, 4.0)),
    ("half_normal", {"scale": 1.7}, st.halfnorm(scale=1.7)),
    ("half_cauchy", {"scale": 1.7}, st.halfcauchy(scale=1.7)),
    ("half_student_t", {"degrees_of_freedom": 4.0, "scale": 1.2}, FoldedT(4.0, 1.2)),
    ("bernoulli", {"probability": 0.3}, st.bernoulli(0.3)),
    ("bernoulli", {"log_odds": -1.2}, st.bernoulli(expit(-1.2))),
    ("binomial", {"trials": 12, "probability": 0.35}, st.binom(12, 0.35)),
    ("binomial", {"trials": 12, "log_odds": 0.4}, st.binom(12, expit(0.4))),
    ("poisson", {"rate": 3.5}, st.poisson(3.5)),
    ("poisson", {"log_rate": 0.2}, st.poisson(np.exp(0.2))),
    ("negative_binomial", {"mean": 4.0, "dispersion": 1.5}, st.nbinom(1.5, 1.5 / 5.5)),
    ("negative_binomial", {"log_mean": np.log(4.0), "dispersion": 1.5}, st.nbinom(1.5, 1.5 / 5.5)),
    ("gumbel", {"location": 0.5, "scale": 1.5}, st.gumbel_r(0.5, 1.5)),
    ("skew_normal", {"location": 0.5, "scale": 1.5, "shape": 4.0}, st.skewnorm(4.0, 0.5, 1.5)),
    ("skew_normal", {"location": 0.5, "scale": 1.5, "shape": -2.0}, st.skewnorm(-2.0, 0.5, 1.5)),
    ("beta_binomial", {"trials": 12, "a": 0.8, "b": 2.5}, st.betabinom(12, 0.8, 2.5)),
]


class ZeroInflated:
    """pi at zero plus (1 - pi) Poisson(rate) (Lambert 1992), built from scipy.stats.poisson."""

    def __init__(self, pi: float, rate: float) -> None:
        self.pi, self.poisson = pi, st.poisson(rate)

    def stats(self, moments):
        mean = (1 - self.pi) * self.poisson.mean()
        second = (1 - self.pi) * (self.poisson.var() + self.poisson.mean() ** 2)
        return mean, second - mean**2

    def cdf(self, q):
        return self.pi + (1 - self.pi) * self.poisson.cdf(q)

    def ppf(self, p):
        # scipy's ppf(0) is -1 (below the support); the smallest value is 0
        return np.maximum(self.poisson.ppf(np.clip((p - self.pi) / (1 - self.pi), 0.0, 1.0)), 0.0)


SCALAR_CASES.append(("zero_inflated_poisson", {"zero_probability": 0.3, "rate": 3.5},
                     ZeroInflated(0.3, 3.5)))


@pytest.mark.parametrize(
    ("name", "args", "reference"), SCALAR_CASES,
    ids=[f"{c[0]}-{'-'.join(c[1])}" for c in SCALAR_CASES],
)
def test_scalar_draws_match_scipy(name, args, reference) -> None:
    dist = find_distribution(name, set(args))
    rng = np.random.default_rng(20261201)
    draws = dist.sample(args, rng, (N,))
    assert draws.shape == (N,)
    if dist.discrete:
        assert np.issubdtype(draws.dtype, np.integer)
    assert np.all(dist.variate_valid(draws, args))
    if not isinstance(reference, FoldedT):
        mean, var = (float(v) for v in reference.stats("mv"))
        if np.isfinite(var):
            assert abs(draws.mean() - mean) < Z * np.sqrt(var / N)
    for p in (0.1, 0.5, 0.9):
        q = reference.ppf(p)
        expected = float(reference.cdf(q))
        observed = float(np.mean(draws <= q))
        assert abs(observed - expected) < Z * np.sqrt(expected * (1 - expected) / N) + 1e-12, p


def test_draws_broadcast_vector_arguments() -> None:
    """Each column follows its own argument (scipy.stats.norm means and sds)."""
    dist = find_distribution("normal", {"location", "scale"})
    location = np.array([-2.0, 0.0, 5.0])
    scale = np.array([0.5, 1.0, 3.0])
    draws = dist.sample({"location": location, "scale": scale}, np.random.default_rng(3), (N, 3))
    assert draws.shape == (N, 3)
    assert np.all(np.abs(draws.mean(axis=0) - location) < Z * scale / np.sqrt(N))
    assert dist.sample({"location": location, "scale": 1.0}, np.random.default_rng(3), None).shape \
        == (3,)


def test_same_seed_same_draws() -> None:
    """Draws depend only on the Generator passed in."""
    dist = find_distribution("gamma", {"shape", "rate"})
    args = {"shape": 2.0, "rate": 1.0}
    a = dist.sample(args, np.random.default_rng(11), (50,))
    b = dist.sample(args, np.random.default_rng(11), (50,))
    np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("alpha", [[1.5, 2.0, 3.5], [0.001, 0.002, 0.003]])
def test_dirichlet_draws(alpha: list[float]) -> None:
    """Component means and variances of scipy.stats.dirichlet, also for tiny concentrations
    (where naive normalised gamma draws underflow to 0/0)."""
    alpha = np.array(alpha)
    dist = find_distribution("dirichlet", {"concentration"})
    draws = dist.sample({"concentration": alpha}, np.random.default_rng(5), (N, 3))
    assert draws.shape == (N, 3)
    assert np.all(np.isfinite(draws))
    np.testing.assert_allclose(draws.sum(axis=1), 1.0, atol=1e-12)
    reference = st.dirichlet(alpha)
    assert np.all(np.abs(draws.mean(axis=0) - reference.mean()) < Z * np.sqrt(reference.var() / N))


def test_multivariate_normal_draws() -> None:
    """Mean and covariance of N(mu, L L^T); the standard error of a sample covariance entry of
    Gaussian data is sqrt((S_ii S_jj + S_ij^2) / n) (common practice)."""
    mu = np.array([1.0, -2.0, 0.5])
    chol = np.array([[1.0, 0.0, 0.0], [0.5, 1.2, 0.0], [-0.3, 0.4, 0.7]])
    sigma = chol @ chol.T
    dist = find_distribution("multivariate_normal", {"location", "covariance_cholesky"})
    draws = dist.sample({"location": mu, "covariance_cholesky": chol}, np.random.default_rng(9),
                        (N, 3))
    assert draws.shape == (N, 3)
    reference = st.multivariate_normal(mu, sigma)
    assert np.all(np.abs(draws.mean(axis=0) - reference.mean) < Z * np.sqrt(np.diag(sigma) / N))
    se = np.sqrt((np.outer(np.diag(sigma), np.diag(sigma)) + sigma**2) / N)
    assert np.all(np.abs(np.cov(draws.T) - sigma) < Z * se)


@pytest.mark.parametrize(("k", "eta"), [(2, 0.7), (3, 2.0), (4, 1.0)])
def test_lkj_draws_have_beta_marginals(k: int, eta: float) -> None:
    dist = find_distribution("lkj_correlation_factor", {"concentration"})
    factors = dist.sample({"concentration": eta}, np.random.default_rng(13), (N, k, k))
    assert factors.shape == (N, k, k)
    assert np.all(dist.variate_valid(factors, {"concentration": eta}))
    corr = factors @ np.swapaxes(factors, -1, -2)
    b = eta - 1.0 + k / 2.0
    marginal = st.beta(b, b, loc=-1.0, scale=2.0)
    rows, cols = np.tril_indices(k, -1)
    for i, j in zip(rows, cols, strict=True):
        r = corr[:, i, j]
        for p in (0.1, 0.5, 0.9):
            q = marginal.ppf(p)
            assert abs(np.mean(r <= q) - p) < Z * np.sqrt(p * (1 - p) / N), (i, j, p)


def test_categorical_draws() -> None:
    """Frequencies against softmax(log_weights), per row of a batch."""
    log_weights = np.array([[0.0, 1.0, -1.0, 0.5], [2.0, 0.0, 0.0, 0.0]])
    dist = find_distribution("categorical", {"log_weights"})
    draws = dist.sample({"log_weights": log_weights}, np.random.default_rng(17), (N, 2))
    assert draws.shape == (N, 2)
    p = softmax(log_weights, axis=-1)
    for row in range(2):
        freq = np.bincount(draws[:, row], minlength=5)[1:] / N
        assert np.all(np.abs(freq - p[row]) < Z * np.sqrt(p[row] * (1 - p[row]) / N))


def test_cumulative_logit_draws() -> None:
    eta, cutpoints = 0.4, np.array([-1.0, 0.3, 1.8])
    dist = find_distribution("cumulative_logit", {"predictor", "cutpoints"})
    draws = dist.sample({"predictor": eta, "cutpoints": cutpoints}, np.random.default_rng(19),
                        (N,))
    upper = np.concatenate([expit(eta - cutpoints), [0.0]])
    p = np.concatenate([[1.0], expit(eta - cutpoints)]) - upper
    freq = np.bincount(draws, minlength=5)[1:] / N
    assert np.all(np.abs(freq - p) < Z * np.sqrt(p * (1 - p) / N))
