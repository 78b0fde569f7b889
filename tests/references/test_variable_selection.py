"""The variable-selection reference (tests/references/variable_selection.py) against routes that
share none of its algebra:

- numerical integration (Gauss-Legendre quadrature, scipy.special.roots_legendre) of the
  marginal likelihood itself, for a design
  with p = 2 (all four models): over (alpha, log sigma^2) of the multivariate normal density of
  y given alpha and sigma^2 (scipy.stats.multivariate_normal, with beta integrated as a linear
  Gaussian: y | alpha, sigma^2 ~ N(alpha 1, sigma^2 (I + X V X')), a textbook fact), and for the
  one-covariate models over (beta, alpha, log sigma^2) of the raw product of normal densities,
  with no marginalisation at all;
- statsmodels' least-squares fits for every R^2 on the Longley data (Longley 1967, as
  statsmodels ships it; REFERENCES.md, NIST StRD);
- the algebraic identity between the g-prior formula of Liang et al. (2008) and the general
  normal-slab marginal when V = g (X'X)^-1, and the exact equality of the g-prior and the
  independent slab s^2 = g / n on an orthogonal design.

Data: invented for the check (a design and responses drawn from a fixed seed).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special, stats

from tests.references.variable_selection import (
    centred,
    g_prior_log_bayes_factor,
    g_prior_posterior,
    independent_slab_posterior,
    orthogonal_design,
    r_squared,
    slab_log_marginal,
)

G = 9.0


def _problem(n: int = 9, p: int = 2, seed: int = 31) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    y = 1.0 + 0.9 * X[:, 0] + 0.2 * rng.standard_normal(n) * 3
    return X, y


# Gauss-Legendre nodes per axis (scipy.special.roots_legendre): the integrands are smooth and
# bell-shaped; doubling the nodes (to 320) changed the logs by less than 1e-12.
NODES = 160


def _nodes(low: float, high: float) -> tuple[np.ndarray, np.ndarray]:
    x, w = special.roots_legendre(NODES)
    half = 0.5 * (high - low)
    return low + half * (x + 1.0), half * w


def _log_sum(log_values: np.ndarray, weights: np.ndarray) -> float:
    peak = log_values.max()
    return float(peak + np.log(np.sum(weights * np.exp(log_values - peak))))


def _limits(
    X: np.ndarray, y: np.ndarray, pattern: tuple[int, ...]
) -> tuple[tuple[float, float], tuple[float, float]]:
    """Where the integrand lives, from the model's least-squares fit (only the grid depends on
    it): alpha within 15 of its standard errors sqrt(RSS / (n (n - 1 - k))) of mean(y) (its
    marginal is a t with about n - 1 - k degrees of freedom, whose mass beyond 15 is below
    1e-6 at n = 9), log sigma^2 from 10 below to 8 above log(RSS / n) (its sd is about
    sqrt(2 / (n - 1)) = 0.5)."""
    n, k = y.size, sum(pattern)
    rss = (1.0 - r_squared(X, y, pattern)) * float(np.sum((y - y.mean()) ** 2))
    spread = 15.0 * np.sqrt(rss / (n * (n - 1 - k)))
    centre = float(np.log(rss / n))
    return (float(y.mean()) - spread, float(y.mean()) + spread), (centre - 10.0, centre + 8.0)


def _log_evidence_2d(X: np.ndarray, y: np.ndarray, pattern: tuple[int, ...]) -> float:
    """log of the integral over alpha and s = log sigma^2 of N(y | alpha 1, e^s S), with
    S = I + g X_g (X_g'X_g)^-1 X_g' (beta integrated as a linear Gaussian), against
    d(sigma^2) / sigma^2 = ds; the density is scipy.stats.multivariate_normal's, used as
    N(y | alpha 1, e^s S) = N((y - alpha 1) e^(-s/2) | 0, S) e^(-n s / 2)."""
    n = y.size
    chosen = centred(X)[:, np.flatnonzero(pattern)]
    S = np.eye(n)
    if chosen.shape[1]:
        S += G * chosen @ np.linalg.solve(chosen.T @ chosen, chosen.T)
    density = stats.multivariate_normal(mean=np.zeros(n), cov=S)
    (a_low, a_high), (s_low, s_high) = _limits(X, y, pattern)
    alphas, alpha_w = _nodes(a_low, a_high)
    scales, scale_w = _nodes(s_low, s_high)
    logs = np.stack([
        density.logpdf((y[None, :] - alphas[:, None]) * np.exp(-0.5 * s)) - 0.5 * n * s
        for s in scales
    ])
    return _log_sum(logs, scale_w[:, None] * alpha_w[None, :])


def _log_evidence_raw(X: np.ndarray, y: np.ndarray, column: int) -> float:
    """The one-covariate model integrated over (beta, alpha, s) with no marginalisation:
    prod_i N(y_i | alpha + x_i beta, e^s) N(beta | 0, e^s g / (x'x)), x the centred column,
    densities from scipy.stats.norm."""
    x = centred(X)[:, column]
    slab_sd = np.sqrt(G / float(x @ x))
    b_hat = float(x @ (y - y.mean()) / (x @ x))
    pattern = tuple(int(j == column) for j in range(X.shape[1]))
    (a_low, a_high), (s_low, s_high) = _limits(X, y, pattern)
    # beta's posterior is centred near the shrunk estimate g / (1 + g) b_hat with about the
    # least-squares standard error: 15 of those either side, around both b_hat and 0
    rss = (1.0 - r_squared(X, y, pattern)) * float(np.sum((y - y.mean()) ** 2))
    se = np.sqrt(rss / ((x.size - 2) * float(x @ x)))
    betas, beta_w = _nodes(min(0.0, b_hat) - 15.0 * se, max(0.0, b_hat) + 15.0 * se)
    alphas, alpha_w = _nodes(a_low, a_high)
    scales, scale_w = _nodes(s_low, s_high)
    total = []
    for s in scales:
        sd = np.exp(0.5 * s)
        mean = alphas[:, None, None] + betas[None, :, None] * x[None, None, :]
        log_lik = stats.norm.logpdf(y[None, None, :], mean, sd).sum(axis=2)
        total.append(log_lik + stats.norm.logpdf(betas, 0.0, sd * slab_sd)[None, :])
    weights = (scale_w[:, None, None] * alpha_w[None, :, None] * beta_w[None, None, :])
    return _log_sum(np.stack(total), weights)


def test_g_prior_bayes_factors_match_numerical_integration() -> None:
    X, y = _problem()
    n = y.size
    null = _log_evidence_2d(X, y, (0, 0))
    for pattern in ((1, 0), (0, 1), (1, 1)):
        numerical = _log_evidence_2d(X, y, pattern) - null
        closed = g_prior_log_bayes_factor(r_squared(X, y, pattern), n, sum(pattern), G)
        assert numerical == pytest.approx(closed, abs=1e-6), pattern


@pytest.mark.parametrize("column", [0, 1])
def test_one_covariate_bayes_factor_matches_a_three_dimensional_integral(column: int) -> None:
    X, y = _problem()
    pattern = (1, 0) if column == 0 else (0, 1)
    numerical = _log_evidence_raw(X, y, column) - _log_evidence_2d(X, y, (0, 0))
    closed = g_prior_log_bayes_factor(r_squared(X, y, pattern), y.size, 1, G)
    assert numerical == pytest.approx(closed, abs=1e-6)


def test_r_squared_matches_statsmodels_on_the_longley_data() -> None:
    sm = pytest.importorskip("statsmodels.api")
    data = sm.datasets.longley.load_pandas()
    X, y = data.exog.to_numpy(), data.endog.to_numpy()
    enumeration = g_prior_posterior(X, y, g=float(len(y)))
    for pattern in enumeration.patterns[1:]:
        fit = sm.OLS(y, sm.add_constant(X[:, np.flatnonzero(pattern)])).fit()
        assert r_squared(X, y, pattern) == pytest.approx(fit.rsquared, rel=1e-8), pattern


def test_the_general_slab_formula_reduces_to_the_g_prior() -> None:
    X, y = _problem(n=14, p=4, seed=8)
    n = y.size
    null = slab_log_marginal(X, y, (0, 0, 0, 0), np.zeros((0, 0)))
    for pattern in ((1, 0, 0, 0), (0, 1, 1, 0), (1, 1, 1, 1)):
        chosen = centred(X)[:, np.flatnonzero(pattern)]
        V = G * np.linalg.inv(chosen.T @ chosen)
        general = slab_log_marginal(X, y, pattern, V) - null
        closed = g_prior_log_bayes_factor(r_squared(X, y, pattern), n, sum(pattern), G)
        assert general == pytest.approx(closed, abs=1e-10)


def test_enumeration_is_a_distribution_and_inclusion_sums_it() -> None:
    X, y = _problem(n=20, p=5, seed=3)
    result = g_prior_posterior(X, y, G, prior_inclusion=0.3)
    assert len(result.patterns) == 32 and result.probabilities.sum() == pytest.approx(1.0)
    for j in range(5):
        with_j = sum(q for s, q in zip(result.patterns, result.probabilities, strict=True)
                     if s[j])
        assert result.inclusion[j] == pytest.approx(with_j)
    best, probability = result.most_probable(1)[0]
    assert result.probability_of(best) == probability == result.probabilities.max()
    # the data were made with the first covariate only (effect 0.9, noise sd 0.6, n = 20)
    assert result.inclusion[0] > 0.95 and result.inclusion[1:].max() < 0.5


def test_on_an_orthogonal_design_the_g_prior_is_the_independent_slab() -> None:
    rng = np.random.default_rng(12)
    n, p = 30, 4
    X = orthogonal_design(rng, n, p)
    np.testing.assert_allclose(X.T @ X, n * np.eye(p), atol=1e-9)
    np.testing.assert_allclose(X.sum(axis=0), 0.0, atol=1e-9)
    y = 0.5 + X @ np.array([0.4, 0.0, 0.15, 0.0]) + rng.standard_normal(n)
    g_prior = g_prior_posterior(X, y, G)
    slab = independent_slab_posterior(X, y, slab_scale=np.sqrt(G / n))
    np.testing.assert_allclose(slab.probabilities, g_prior.probabilities, rtol=1e-10)
