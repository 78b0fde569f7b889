"""The Wishart distribution on a Cholesky factor (wishart_factor) and the covariance_factor
structure, against scipy.stats.wishart.

If W = L L^T ~ Wishart(nu, S), the density of L (lower triangular, positive diagonal, with respect
to its K(K+1)/2 entries on and below the diagonal) is scipy.stats.wishart.logpdf(W) plus
log|dW/dL| = K log 2 + sum_j (K - j + 1) log L_jj for 1-based j (Muirhead 1982, Aspects of
Multivariate Statistical Theory, Theorem 2.1.9, from memory; derived in
docs/distributions-wishart.md, and checked here on its own against numpy.linalg.slogdet of the
numerical Jacobian of L -> W). Draws are checked against scipy.stats.wishart's mean and variance,
and against the scaled chi-square marginal of each diagonal entry, W_jj ~ S_jj chi2(nu) (from
memory; scipy.stats.wishart.var gives the same variance 2 nu S_jj^2).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats as st
from scipy.optimize import approx_fprime

from worker.modeling import compile_model
from worker.modeling.distributions import find_distribution
from worker.problems import InvalidSubmission

from .central_differences import assert_gradient_close, central_gradient

ARGUMENTS = {"degrees_of_freedom", "scale_cholesky"}


def wishart_factor():
    return find_distribution("wishart_factor", ARGUMENTS)


def scale_matrix(k: int, seed: int) -> np.ndarray:
    a = np.random.default_rng(seed).standard_normal((k, k))
    return a @ a.T + k * np.eye(k)


def log_jacobian(factor: np.ndarray) -> np.ndarray:
    """log|dW/dL| of W = L L^T: K log 2 + sum_j (K - j + 1) log L_jj (1-based j)."""
    k = factor.shape[-1]
    powers = np.arange(k, 0, -1, dtype=float)
    return k * np.log(2.0) + np.sum(powers * np.log(np.diagonal(factor, axis1=-2, axis2=-1)),
                                    axis=-1)


def vech(w: np.ndarray) -> np.ndarray:
    rows, cols = np.tril_indices(w.shape[-1])
    return w[..., rows, cols]


@pytest.mark.parametrize(("k", "nu"), [(1, 0.7), (2, 1.5), (3, 4.5), (4, 3.2), (5, 12.0)])
def test_log_density_is_scipy_wishart_plus_the_jacobian(k: int, nu: float) -> None:
    scale = scale_matrix(k, seed=k)
    reference = st.wishart(nu, scale)
    w = reference.rvs(size=6, random_state=np.random.default_rng(20 + k)).reshape(6, k, k)
    factors = np.linalg.cholesky(w)
    ours = wishart_factor().log_density(
        factors, {"degrees_of_freedom": nu, "scale_cholesky": np.linalg.cholesky(scale)}
    )
    expected = np.array([reference.logpdf(m) for m in w]) + log_jacobian(factors)
    np.testing.assert_allclose(ours, expected, rtol=1e-10, atol=1e-10)


def test_batched_degrees_of_freedom_and_scales() -> None:
    """A batch of factors, each with its own degrees of freedom and scale."""
    k = 3
    nus = np.array([3.0, 5.5])
    scales = np.stack([scale_matrix(k, 1), scale_matrix(k, 2)])
    w = np.stack([st.wishart(nu, s).rvs(random_state=i) for i, (nu, s) in enumerate(
        zip(nus, scales, strict=True))])
    factors = np.linalg.cholesky(w)
    ours = wishart_factor().log_density(
        factors, {"degrees_of_freedom": nus, "scale_cholesky": np.linalg.cholesky(scales)}
    )
    expected = [st.wishart(nu, s).logpdf(m) for nu, s, m in zip(nus, scales, w, strict=True)]
    np.testing.assert_allclose(ours, np.array(expected) + log_jacobian(factors), rtol=1e-10)


@pytest.mark.parametrize("k", [1, 2, 4])
def test_jacobian_formula_against_the_numerical_jacobian(k: int) -> None:
    """log|det d vech(L L^T) / d vech(L)| from central differences (the map is quadratic, so they
    are exact up to rounding) and numpy.linalg.slogdet, against the closed form used above."""
    factor = np.linalg.cholesky(scale_matrix(k, 7 + k))
    rows, cols = np.tril_indices(k)

    def w_of(entries: np.ndarray) -> np.ndarray:
        m = np.zeros((k, k))
        m[rows, cols] = entries
        return vech(m @ m.T)

    entries = factor[rows, cols]
    jacobian = 0.5 * (approx_fprime(entries, w_of, 1e-6) + approx_fprime(entries, w_of, -1e-6))
    sign, logdet = np.linalg.slogdet(np.atleast_2d(jacobian))
    assert sign != 0
    assert logdet == pytest.approx(float(log_jacobian(factor)), rel=1e-7, abs=1e-7)


def test_gradients_match_central_differences() -> None:
    k, nu = 3, 4.3
    dist = wishart_factor()
    chol = np.linalg.cholesky(scale_matrix(k, 3))
    factor = np.linalg.cholesky(st.wishart(nu, chol @ chol.T).rvs(random_state=5))
    rows, cols = np.tril_indices(k)

    def lower(entries: np.ndarray) -> np.ndarray:
        m = np.zeros((k, k))
        m[rows, cols] = entries
        return m

    def total(x, n, c) -> float:
        return float(np.sum(dist.log_density(x, {"degrees_of_freedom": n, "scale_cholesky": c})))

    wrt = frozenset({"x", "degrees_of_freedom", "scale_cholesky"})
    value, grads = dist.log_density_and_gradients(
        factor, {"degrees_of_freedom": nu, "scale_cholesky": chol}, wrt
    )
    scale = abs(float(value))
    numeric_x = central_gradient(lambda e: total(lower(e), nu, chol), factor[rows, cols])
    assert_gradient_close(grads["x"][rows, cols], numeric_x, scale=scale)
    assert np.all(np.triu(grads["x"], 1) == 0)
    numeric_nu = central_gradient(lambda n: total(factor, n[0], chol), np.array([nu]))
    assert_gradient_close(np.atleast_1d(grads["degrees_of_freedom"]), numeric_nu, scale=scale)
    numeric_c = central_gradient(lambda e: total(factor, nu, lower(e)), chol[rows, cols])
    assert_gradient_close(grads["scale_cholesky"][rows, cols], numeric_c, scale=scale)


def test_outside_the_support_is_minus_infinity() -> None:
    """nu must exceed K - 1 (Muirhead 1982, Definition 3.2.1, from memory); the variate must be
    lower triangular with a positive diagonal; so must the scale's factor."""
    dist = wishart_factor()
    good = np.array([[1.0, 0.0], [0.5, 2.0]])
    upper = np.array([[1.0, 0.1], [0.5, 2.0]])
    negative = np.array([[1.0, 0.0], [0.5, -2.0]])
    values = dist.log_density(np.stack([good, upper, negative]),
                              {"degrees_of_freedom": 2.0, "scale_cholesky": np.eye(2)})
    assert np.isfinite(values[0]) and np.all(values[1:] == -np.inf)
    at_edge = dist.log_density(good, {"degrees_of_freedom": np.array([1.5, 1.0]),
                                      "scale_cholesky": np.eye(2)})
    assert np.isfinite(at_edge[0]) and at_edge[1] == -np.inf
    singular = dist.log_density(good, {"degrees_of_freedom": 3.0,
                                       "scale_cholesky": np.stack([np.eye(2), np.zeros((2, 2))])})
    assert np.isfinite(singular[0]) and singular[1] == -np.inf


N = 100_000
LIMIT = 4.0  # standard errors


def diagonal_sd_misses(factors: np.ndarray, nu: float, scale: np.ndarray) -> list[int]:
    """Diagonal entries j whose sample sd of W_jj is more than LIMIT standard errors from
    sqrt(2 nu) S_jj, the sd of S_jj chi2(nu).

    The standard error of a sample sd is about sd sqrt((kappa - 1) / (4 N)), kappa the kurtosis
    (3 + 12/nu for a chi-square; common practice). For nu = 5 and N = 100,000 that is 0.33 % of
    the sd, so a 2 % error is 6.0 standard errors, and a check at 4 finds it with probability
    Phi(6.0 - 4) = 0.977 per entry (with three entries, at least one of them fails with
    probability above 0.99 when the error is in all of them); a correct sampler fails one entry
    with probability 2 (1 - Phi(4)) = 6e-5.
    """
    w = factors @ np.swapaxes(factors, -1, -2)
    sd = np.sqrt(2.0 * nu) * np.diag(scale)
    relative_se = np.sqrt((2.0 + 12.0 / nu) / (4.0 * len(w)))
    observed = np.std(np.diagonal(w, axis1=-2, axis2=-1), axis=0, ddof=1)
    return [j for j in range(len(sd)) if abs(observed[j] - sd[j]) > LIMIT * relative_se * sd[j]]


def test_draws_match_scipy_wishart_moments() -> None:
    """Bartlett-decomposition draws: every entry of W's mean within LIMIT standard errors
    (scipy.stats.wishart.var / N) of nu S, each diagonal entry's chi-square quantiles, and each
    diagonal entry's sd with the power stated in diagonal_sd_misses; the same sd check fails on
    the draws with W scaled by 0.98 and 1.02 (L by their square roots)."""
    k, nu = 3, 5.0
    scale = scale_matrix(k, 11)
    dist = wishart_factor()
    args = {"degrees_of_freedom": nu, "scale_cholesky": np.linalg.cholesky(scale)}
    factors = dist.sample(args, np.random.default_rng(23), (N, k, k))
    assert factors.shape == (N, k, k)
    assert np.all(dist.variate_valid(factors, args))
    reference = st.wishart(nu, scale)
    w = factors @ np.swapaxes(factors, -1, -2)
    assert np.all(np.abs(w.mean(axis=0) - reference.mean()) < LIMIT * np.sqrt(reference.var() / N))
    for j in range(k):
        ratio = w[:, j, j] / scale[j, j]
        for p in (0.1, 0.5, 0.9):
            q = st.chi2(nu).ppf(p)
            assert abs(np.mean(ratio <= q) - p) < LIMIT * np.sqrt(p * (1 - p) / N), (j, p)
    assert diagonal_sd_misses(factors, nu, scale) == []
    for factor_of_w in (0.98, 1.02):
        assert diagonal_sd_misses(factors * np.sqrt(factor_of_w), nu, scale) != []


def test_draw_shape_follows_the_arguments() -> None:
    dist = wishart_factor()
    chol = np.stack([np.eye(2), 2.0 * np.eye(2)])
    draws = dist.sample({"degrees_of_freedom": np.array([3.0, 4.0]), "scale_cholesky": chol},
                        np.random.default_rng(1), None)
    assert draws.shape == (2, 2, 2)
    assert np.all(dist.variate_valid(draws, {}))


SPEC = {
    "unknowns": {"factor": {"shape": [3, 3], "structure": "covariance_factor"}},
    "priors": [{"on": "factor", "distribution": "wishart_factor",
                "arguments": {"degrees_of_freedom": 6,
                              "scale_cholesky": [[1, 0, 0], [0.5, 2, 0], [-0.3, 0.2, 1.5]]}}],
}


def test_compiled_prior_is_the_wishart_density_of_w_with_both_jacobians() -> None:
    """The compiled model's log density at u is log p_W(L L^T) + log|dW/dL| + log|dL/du|, the last
    being the sum of the u that become diagonal entries (L_jj = exp(u)); its gradient agrees with
    central differences."""
    model = compile_model(SPEC, {})
    assert model.dimension == 6
    chol = np.array(SPEC["priors"][0]["arguments"]["scale_cholesky"], dtype=float)
    reference = st.wishart(6, chol @ chol.T)
    rows, cols = np.tril_indices(3)
    rng = np.random.default_rng(4)
    for _ in range(3):
        u = rng.normal(0.0, 0.5, model.dimension)
        factor = np.zeros((3, 3))
        factor[rows, cols] = np.where(rows == cols, np.exp(u), u)
        expected = (reference.logpdf(factor @ factor.T) + log_jacobian(factor)
                    + np.sum(u[rows == cols]))
        value, gradient = model.log_density_and_gradient(u)
        assert value == pytest.approx(float(expected), rel=1e-10)
        assert_gradient_close(gradient, central_gradient(model.log_density, u), scale=abs(value))


def test_the_prior_needs_the_structure() -> None:
    spec = {**SPEC, "unknowns": {"factor": {"shape": [3, 3]}}}
    with pytest.raises(InvalidSubmission) as caught:
        compile_model(spec, {})
    text = str(caught.value.problems)
    assert "structure: covariance_factor" in text and "/priors/0" in text


def test_the_factor_as_a_multivariate_normal_covariance() -> None:
    """The typical use: the factor is the covariance_cholesky of a multivariate normal likelihood.
    The likelihood term is scipy.stats.multivariate_normal's log density with covariance L L^T;
    the gradient agrees with central differences and a reported draw is the factor itself."""
    y = [[0.5, -1.0], [1.5, 0.2], [-0.3, 0.8], [2.0, 1.1]]
    spec = {
        "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n", 2]}},
        "unknowns": {"factor": {"shape": [2, 2], "structure": "covariance_factor"}},
        "priors": [{"on": "factor", "distribution": "wishart_factor",
                    "arguments": {"degrees_of_freedom": 4,
                                  "scale_cholesky": [[1, 0], [0, 1]]}}],
        "likelihood": [{"name": "obs", "observed": "y", "distribution": "multivariate_normal",
                        "arguments": {"location": [0, 0], "covariance_cholesky": "factor"}}],
    }
    model = compile_model(spec, {"n": 4, "y": y})
    prior_only = compile_model({**spec, "likelihood": [], "inputs": {}}, {})
    rng = np.random.default_rng(8)
    for _ in range(3):
        u = rng.normal(0.0, 0.5, model.dimension)
        factor = np.array([[np.exp(u[0]), 0.0], [u[1], np.exp(u[2])]])
        value, gradient = model.log_density_and_gradient(u)
        expected = np.sum(st.multivariate_normal(np.zeros(2), factor @ factor.T).logpdf(y))
        assert value - prior_only.log_density(u) == pytest.approx(float(expected), rel=1e-10)
        assert_gradient_close(gradient, central_gradient(model.log_density, u), scale=abs(value))
        row = model.report(u, rng)
        np.testing.assert_allclose(row[:4], factor.ravel(), rtol=1e-12)
