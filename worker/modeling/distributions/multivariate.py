"""Distributions on vectors and matrices: Dirichlet, multivariate normal, LKJ (Cholesky form)."""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import betaln, digamma, gammaln, xlogy

from ..special import LOG_2, LOG_2PI, softmax, sum_last
from ..transforms import cholesky_from_partial_correlations
from .base import STRUCTURE_TOLERANCE, Array, Distribution, Summed, correlation_factor_valid

Pointwise = tuple[Array, dict[str, Array], Array | None]


class Dirichlet(Distribution):
    name = "dirichlet"
    arguments = ("concentration",)
    variate_kind = "simplex"
    event_ndim = 1
    argument_support = {"concentration": "positive"}
    argument_event_ndim = {"concentration": 1}

    def _log_density_and_pointwise(self, x, concentration, wrt) -> Pointwise:
        a = concentration
        total = sum_last(a)
        val = gammaln(total) - sum_last(gammaln(a)) + sum_last(xlogy(a - 1.0, x))
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = (a - 1.0) / x
        if "concentration" in wrt:
            grads["concentration"] = digamma(total)[..., None] - digamma(a) + np.log(x)
        bad = (
            np.any(~(a > 0), axis=-1)
            | np.any(~(x >= 0), axis=-1)
            | ~(np.abs(np.sum(x, axis=-1) - 1.0) <= STRUCTURE_TOLERANCE * x.shape[-1])
        )
        val = np.broadcast_to(val, bad.shape) if val.shape != bad.shape else val
        return val, grads, bad if bad.any() else None

    def _sample(self, rng, shape, concentration):
        # normalised Gamma(a) draws, built in log space as Gamma(a + 1) * U^(1/a) (Marsaglia &
        # Tsang 2000, section 6) so that small concentrations cannot underflow every component
        a = np.broadcast_to(concentration, shape)
        log_g = np.log(rng.standard_gamma(a + 1.0)) + np.log(rng.random(shape)) / a
        return softmax(log_g)


class MultivariateNormal(Distribution):
    """Normal with covariance L L^T given the lower-triangular factor L (entries above the diagonal
    are not read)."""

    name = "multivariate_normal"
    arguments = ("location", "covariance_cholesky")
    event_ndim = 1
    argument_support = {"location": "real", "covariance_cholesky": "cholesky_factor"}
    argument_event_ndim = {"location": 1, "covariance_cholesky": 2}

    def _log_density_and_pointwise(self, x, location, covariance_cholesky, wrt) -> Pointwise:
        chol = covariance_cholesky
        k = chol.shape[-1]
        r = x - location
        diagonal = np.diagonal(chol, axis1=-2, axis2=-1)
        shared = chol.ndim == 2
        if shared:
            flat = r.reshape(-1, k).T
            z = solve_triangular(chol, flat, lower=True, check_finite=False)
            w = None
            if wrt:
                w = solve_triangular(chol, z, lower=True, trans="T", check_finite=False)
            z = z.T.reshape(r.shape)
        else:
            lower = np.tril(chol)
            batch = np.broadcast_shapes(r.shape[:-1], chol.shape[:-2])
            r = np.broadcast_to(r, batch + (k,))
            z = np.linalg.solve(lower, r[..., None])[..., 0]
            w = np.linalg.solve(np.swapaxes(lower, -1, -2), z[..., None])[..., 0] if wrt else None
        val = -0.5 * k * LOG_2PI - np.sum(np.log(diagonal), axis=-1) - 0.5 * sum_last(z * z)
        grads: dict[str, Array] = {}
        bad = np.any(~(diagonal > 0), axis=-1)
        if wrt:
            if shared:
                w = w.T.reshape(z.shape)
            if "x" in wrt:
                grads["x"] = -w
            if "location" in wrt:
                grads["location"] = w
            if "covariance_cholesky" in wrt:
                if shared:
                    # one factor for the whole batch: sum the outer products in one matrix product
                    n = int(np.prod(z.shape[:-1], dtype=np.int64))
                    g = np.tril(w.reshape(-1, k).T @ z.reshape(-1, k)) - n * np.diag(1.0 / diagonal)
                    grads["covariance_cholesky"] = Summed(np.zeros_like(g) if bad else g)
                else:
                    g = w[..., :, None] * z[..., None, :]
                    g = np.tril(g) - (1.0 / diagonal)[..., None] * np.eye(k)
                    grads["covariance_cholesky"] = g
        if np.shape(bad) != val.shape:
            bad = np.broadcast_to(bad, val.shape)
        return val, grads, bad if bad.any() else None

    def _sample(self, rng, shape, location, covariance_cholesky):
        e = rng.standard_normal(shape)
        return location + np.einsum("...ij,...j->...i", np.tril(covariance_cholesky), e)

    def _default_shape(self, values):
        loc, chol = values
        batch = np.broadcast_shapes(loc.shape[:-1], chol.shape[:-2])
        return batch + (chol.shape[-1],)


def _lkj_log_normaliser(eta: Array, k: int, with_derivative: bool):
    """log c_K(eta), where the LKJ density on correlation matrices is det(R)^(eta-1) / c_K(eta):
    c_K = 2^(sum_{j=1}^{K-1} (2 eta - 2 + K - j)(K - j)) prod_{j=1}^{K-1} B(b_j, b_j)^(K - j),
    b_j = eta + (K - j - 1) / 2 (Lewandowski, Kurowicka & Joe 2009, section 3.2, from memory; the
    tests check it integrates the density to one)."""
    j = np.arange(1, k, dtype=float)
    m = k - j                                     # multiplicity of each level
    eta = np.asarray(eta, dtype=float)[..., None]
    b = eta + 0.5 * (m - 1.0)
    value = np.sum((2.0 * eta - 2.0 + m) * m * LOG_2 + m * betaln(b, b), axis=-1)
    if not with_derivative:
        return value, None
    derivative = np.sum(2.0 * m * LOG_2 + 2.0 * m * (digamma(b) - digamma(2.0 * b)), axis=-1)
    return value, derivative


class LkjCorrelationFactor(Distribution):
    """LKJ(eta) on a correlation matrix, as a density on its Cholesky factor L with respect to the
    strictly lower entries: prod_{k=2}^K L_kk^(K - k + 2 eta - 2) / c_K(eta)."""

    name = "lkj_correlation_factor"
    arguments = ("concentration",)
    variate_kind = "correlation_factor"
    event_ndim = 2
    argument_support = {"concentration": "positive"}

    def _log_density_and_pointwise(self, x, concentration, wrt) -> Pointwise:
        k = x.shape[-1]
        eta = concentration
        diagonal = np.diagonal(x, axis1=-2, axis2=-1)[..., 1:]
        log_diag = np.log(diagonal)
        # exponent for 1-based row k = 2..K is K - k + 2 eta - 2
        power = np.arange(k - 2, -1, -1, dtype=float) + 2.0 * (np.asarray(eta)[..., None] - 1.0)
        log_c, d_log_c = _lkj_log_normaliser(eta, k, "concentration" in wrt)
        val = np.sum(power * log_diag, axis=-1) - log_c
        grads: dict[str, Array] = {}
        if "x" in wrt:
            batch = np.broadcast_shapes(x.shape[:-2], np.shape(eta))
            g = np.zeros(batch + (k, k))
            idx = np.arange(1, k)
            g[..., idx, idx] = power / diagonal
            grads["x"] = g
        if "concentration" in wrt:
            grads["concentration"] = 2.0 * np.sum(log_diag, axis=-1) - d_log_c
        bad = ~(eta > 0) | ~correlation_factor_valid(x)
        if np.shape(bad) != val.shape:
            bad = np.broadcast_to(bad, val.shape)
        return val, grads, bad if bad.any() else None

    def _sample(self, rng, shape, concentration):
        # C-vine method (Lewandowski, Kurowicka & Joe 2009, section 2.4): the partial correlation of
        # row i with column j given columns before j is 2 Beta(b_j, b_j) - 1, with
        # b_j = eta + (K - 2 - j) / 2 for 0-based column j; these are the canonical partial
        # correlations that build the Cholesky factor
        k = shape[-1]
        b = np.asarray(concentration)[..., None, None] + 0.5 * (k - 2 - np.arange(k))
        b = np.broadcast_to(b, tuple(shape))
        z = 2.0 * rng.beta(b, b) - 1.0
        return cholesky_from_partial_correlations(z)[0]

    def _default_shape(self, values):
        raise ValueError("lkj_correlation_factor draws need an explicit shape [..., K, K]")
