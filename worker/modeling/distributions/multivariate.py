"""Distributions on vectors and matrices: Dirichlet, multivariate normal, LKJ (Cholesky form),
Wishart (Cholesky form)."""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import betaln, digamma, gammaln, xlogy

from ..special import LOG_2, LOG_2PI, softmax, sum_last
from ..transforms import cholesky_from_partial_correlations
from .base import (
    STRUCTURE_TOLERANCE,
    Array,
    Distribution,
    Summed,
    correlation_factor_valid,
    covariance_factor_valid,
)

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


LOG_PI = float(np.log(np.pi))


class WishartFactor(Distribution):
    """Wishart(nu, S) on W = L L^T, as a density on its Cholesky factor L (lower triangular,
    positive diagonal) with respect to the K(K+1)/2 entries on and below the diagonal.

    The scale is given by its own Cholesky factor C (S = C C^T; entries above the diagonal are not
    read). With W's density |W|^((nu-K-1)/2) exp(-tr(S^-1 W)/2) / (2^(nu K/2) |S|^(nu/2)
    Gamma_K(nu/2)) (Muirhead 1982, Aspects of Multivariate Statistical Theory, Definition 3.2.1,
    from memory; checked against scipy.stats.wishart in tests/modeling/test_wishart_factor.py) and
    the Jacobian of L -> W = L L^T, |dW/dL| = 2^K prod_j L_jj^(K-j+1) (docs/distributions-wishart.md
    derives it; Muirhead 1982, Theorem 2.1.9), for 1-based j:

        log p(L) = sum_j (nu - j) log L_jj - ||C^-1 L||_F^2 / 2 - nu sum_j log C_jj
                   - (nu K/2 - K) log 2 - log Gamma_K(nu/2),

    since tr(S^-1 L L^T) = ||C^-1 L||_F^2 and the powers of L_jj from |W| and the Jacobian add up
    to nu - j. Needs nu > K - 1.
    """

    name = "wishart_factor"
    arguments = ("degrees_of_freedom", "scale_cholesky")
    variate_kind = "covariance_factor"
    event_ndim = 2
    argument_support = {"degrees_of_freedom": "positive", "scale_cholesky": "cholesky_factor"}
    argument_event_ndim = {"scale_cholesky": 2}

    def _log_density_and_pointwise(self, x, degrees_of_freedom, scale_cholesky, wrt) -> Pointwise:
        k = x.shape[-1]
        nu = np.asarray(degrees_of_freedom, dtype=float)
        chol = np.tril(scale_cholesky)
        factor = np.tril(x)
        diagonal = np.diagonal(x, axis1=-2, axis2=-1)
        scale_diagonal = np.diagonal(chol, axis1=-2, axis2=-1)
        usable = scale_diagonal > 0
        if not np.all(usable):
            # a factor with a zero on its diagonal is singular; those elements are out of
            # support and masked below, so solve with a harmless diagonal instead of failing
            chol = chol.copy()
            index = np.arange(k)
            chol[..., index, index] = np.where(usable, scale_diagonal, 1.0)
        z = np.linalg.solve(chol, factor)  # C^-1 L, lower triangular
        j = np.arange(1, k + 1, dtype=float)
        half_nu = 0.5 * nu
        # log Gamma_K(a) = K(K-1)/4 log pi + sum_j log Gamma(a + (1 - j)/2)
        shifted = half_nu[..., None] + 0.5 * (1.0 - j)
        log_multigamma = 0.25 * k * (k - 1) * LOG_PI + np.sum(gammaln(shifted), axis=-1)
        log_diagonal = np.log(diagonal)
        log_scale_diagonal = np.sum(np.log(scale_diagonal), axis=-1)
        val = (
            np.sum((nu[..., None] - j) * log_diagonal, axis=-1)
            - 0.5 * np.sum(z * z, axis=(-2, -1))
            - nu * log_scale_diagonal
            - (half_nu * k - k) * LOG_2
            - log_multigamma
        )
        grads: dict[str, Array] = {}
        if "x" in wrt or "scale_cholesky" in wrt:
            u = np.linalg.solve(np.swapaxes(chol, -1, -2), z)  # C^-T C^-1 L
            eye = np.eye(k)
            if "x" in wrt:
                grads["x"] = ((nu[..., None] - j) / diagonal)[..., None] * eye - np.tril(u)
            if "scale_cholesky" in wrt:
                # d(-||C^-1 L||^2 / 2)/dC = C^-T (C^-1 L)(C^-1 L)^T, kept on and below the diagonal
                grads["scale_cholesky"] = (
                    np.tril(u @ np.swapaxes(z, -1, -2))
                    - (nu[..., None] / scale_diagonal)[..., None] * eye
                )
        if "degrees_of_freedom" in wrt:
            grads["degrees_of_freedom"] = (
                np.sum(log_diagonal, axis=-1) - log_scale_diagonal - 0.5 * k * LOG_2
                - 0.5 * np.sum(digamma(shifted), axis=-1)
            )
        bad = (
            ~(nu > k - 1)
            | ~covariance_factor_valid(x)
            | ~np.all(usable, axis=-1)
        )
        if np.shape(bad) != val.shape:
            bad = np.broadcast_to(bad, val.shape)
        return val, grads, bad if bad.any() else None

    def _sample(self, rng, shape, degrees_of_freedom, scale_cholesky):
        # Bartlett (1933): L = C A with A lower triangular, A_jj^2 ~ chi-square(nu - j + 1) for
        # 1-based j and N(0, 1) entries below the diagonal, all independent; C A is lower
        # triangular with a positive diagonal, so it is the Cholesky factor of W = C A A^T C^T
        k = shape[-1]
        batch = tuple(shape[:-2])
        nu = np.broadcast_to(np.asarray(degrees_of_freedom)[..., None], batch + (1,))
        a = np.tril(rng.standard_normal(tuple(shape)), -1)
        index = np.arange(k)
        a[..., index, index] = np.sqrt(rng.chisquare(nu - index, batch + (k,)))
        return np.tril(scale_cholesky) @ a

    def _default_shape(self, values):
        nu, chol = values
        return np.broadcast_shapes(nu.shape, chol.shape[:-2]) + chol.shape[-2:]
