"""Continuous distributions on the real line, the half line and intervals.

Formulas are the standard densities (e.g. Johnson, Kotz & Balakrishnan, Continuous Univariate
Distributions); gradients are their analytic derivatives, computed in the same pass as the value.
"""

from __future__ import annotations

import numpy as np
from scipy.special import betaln, digamma, gammaln, log_ndtr, xlog1py, xlogy

from ..special import LOG_2, LOG_2PI, LOG_PI
from .base import Array, Distribution, mask_or_none, nonnegative, positive

Pointwise = tuple[Array, dict[str, Array], Array | None]


class Normal(Distribution):
    name = "normal"
    arguments = ("location", "scale")
    argument_support = {"location": "real", "scale": "positive"}

    def _log_density_and_pointwise(self, x, location, scale, wrt) -> Pointwise:
        z = (x - location) / scale
        val = -0.5 * (z * z) - np.log(scale) - 0.5 * LOG_2PI
        grads: dict[str, Array] = {}
        if wrt:
            dz = z / scale
            if "x" in wrt:
                grads["x"] = -dz
            if "location" in wrt:
                grads["location"] = dz
            if "scale" in wrt:
                grads["scale"] = (z * z - 1.0) / scale
        return val, grads, None if positive(scale) else mask_or_none(~(scale > 0))

    def _sample(self, rng, shape, location, scale):
        return location + scale * rng.standard_normal(shape)


class HalfNormal(Distribution):
    name = "half_normal"
    arguments = ("scale",)
    variate_kind = "nonnegative"
    argument_support = {"scale": "positive"}

    def _log_density_and_pointwise(self, x, scale, wrt) -> Pointwise:
        z = x / scale
        val = -0.5 * (z * z) - np.log(scale) + (LOG_2 - 0.5 * LOG_2PI)
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = -z / scale
        if "scale" in wrt:
            grads["scale"] = (z * z - 1.0) / scale
        return val, grads, (
            None if positive(scale) and nonnegative(x) else mask_or_none(~(scale > 0) | ~(x >= 0))
        )

    def _sample(self, rng, shape, scale):
        return scale * np.abs(rng.standard_normal(shape))


def _student_t_core(z: Array, nu: Array, scale: Array, wrt_nu: bool):
    """Shared pieces of the Student-t log density in the standardised value z = (x - m) / s."""
    q = z * z / nu
    log1pq = np.log1p(q)
    half_nu = 0.5 * nu
    val = (
        gammaln(half_nu + 0.5)
        - gammaln(half_nu)
        - 0.5 * np.log(nu * np.pi)
        - np.log(scale)
        - (half_nu + 0.5) * log1pq
    )
    # d/dz of the value, and (z^2 (nu + 1) / (nu + z^2)) reused by the scale derivative
    ratio = (nu + 1.0) * z / (nu + z * z)
    d_nu = None
    if wrt_nu:
        d_nu = 0.5 * (
            digamma(half_nu + 0.5) - digamma(half_nu) - 1.0 / nu - log1pq
            + (nu + 1.0) * q / (nu + z * z)
        )
    return val, ratio, d_nu


class StudentT(Distribution):
    name = "student_t"
    arguments = ("degrees_of_freedom", "location", "scale")
    argument_support = {"degrees_of_freedom": "positive", "location": "real", "scale": "positive"}

    def _log_density_and_pointwise(self, x, degrees_of_freedom, location, scale, wrt) -> Pointwise:
        z = (x - location) / scale
        want_nu = "degrees_of_freedom" in wrt
        val, ratio, d_nu = _student_t_core(z, degrees_of_freedom, scale, want_nu)
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = -ratio / scale
        if "location" in wrt:
            grads["location"] = ratio / scale
        if "scale" in wrt:
            grads["scale"] = (ratio * z - 1.0) / scale
        if d_nu is not None:
            grads["degrees_of_freedom"] = d_nu
        return val, grads, (
            None if positive(scale, degrees_of_freedom)
            else mask_or_none(~(scale > 0) | ~(degrees_of_freedom > 0))
        )

    def _sample(self, rng, shape, degrees_of_freedom, location, scale):
        return location + scale * rng.standard_t(np.broadcast_to(degrees_of_freedom, shape))


class HalfStudentT(Distribution):
    name = "half_student_t"
    arguments = ("degrees_of_freedom", "scale")
    variate_kind = "nonnegative"
    argument_support = {"degrees_of_freedom": "positive", "scale": "positive"}

    def _log_density_and_pointwise(self, x, degrees_of_freedom, scale, wrt) -> Pointwise:
        z = x / scale
        want_nu = "degrees_of_freedom" in wrt
        val, ratio, d_nu = _student_t_core(z, degrees_of_freedom, scale, want_nu)
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = -ratio / scale
        if "scale" in wrt:
            grads["scale"] = (ratio * z - 1.0) / scale
        if d_nu is not None:
            grads["degrees_of_freedom"] = d_nu
        if positive(scale, degrees_of_freedom) and nonnegative(x):
            return val + LOG_2, grads, None
        bad = ~(scale > 0) | ~(degrees_of_freedom > 0) | ~(x >= 0)
        return val + LOG_2, grads, mask_or_none(bad)

    def _sample(self, rng, shape, degrees_of_freedom, scale):
        return scale * np.abs(rng.standard_t(np.broadcast_to(degrees_of_freedom, shape)))


class Cauchy(Distribution):
    name = "cauchy"
    arguments = ("location", "scale")
    argument_support = {"location": "real", "scale": "positive"}

    def _log_density_and_pointwise(self, x, location, scale, wrt) -> Pointwise:
        z = (x - location) / scale
        zz = z * z
        val = -LOG_PI - np.log(scale) - np.log1p(zz)
        grads: dict[str, Array] = {}
        if wrt:
            dz = 2.0 * z / ((1.0 + zz) * scale)
            if "x" in wrt:
                grads["x"] = -dz
            if "location" in wrt:
                grads["location"] = dz
            if "scale" in wrt:
                grads["scale"] = (zz - 1.0) / ((1.0 + zz) * scale)
        return val, grads, None if positive(scale) else mask_or_none(~(scale > 0))

    def _sample(self, rng, shape, location, scale):
        return location + scale * rng.standard_cauchy(shape)


class HalfCauchy(Distribution):
    name = "half_cauchy"
    arguments = ("scale",)
    variate_kind = "nonnegative"
    argument_support = {"scale": "positive"}

    def _log_density_and_pointwise(self, x, scale, wrt) -> Pointwise:
        z = x / scale
        zz = z * z
        val = (LOG_2 - LOG_PI) - np.log(scale) - np.log1p(zz)
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = -2.0 * z / ((1.0 + zz) * scale)
        if "scale" in wrt:
            grads["scale"] = (zz - 1.0) / ((1.0 + zz) * scale)
        return val, grads, (
            None if positive(scale) and nonnegative(x) else mask_or_none(~(scale > 0) | ~(x >= 0))
        )

    def _sample(self, rng, shape, scale):
        return scale * np.abs(rng.standard_cauchy(shape))


class Laplace(Distribution):
    name = "laplace"
    arguments = ("location", "scale")
    argument_support = {"location": "real", "scale": "positive"}

    def _log_density_and_pointwise(self, x, location, scale, wrt) -> Pointwise:
        z = (x - location) / scale
        az = np.abs(z)
        val = -LOG_2 - np.log(scale) - az
        grads: dict[str, Array] = {}
        if wrt:
            dz = np.sign(z) / scale
            if "x" in wrt:
                grads["x"] = -dz
            if "location" in wrt:
                grads["location"] = dz
            if "scale" in wrt:
                grads["scale"] = (az - 1.0) / scale
        return val, grads, None if positive(scale) else mask_or_none(~(scale > 0))

    def _sample(self, rng, shape, location, scale):
        return rng.laplace(np.broadcast_to(location, shape), scale)


class Logistic(Distribution):
    name = "logistic"
    arguments = ("location", "scale")
    argument_support = {"location": "real", "scale": "positive"}

    def _log_density_and_pointwise(self, x, location, scale, wrt) -> Pointwise:
        z = (x - location) / scale
        # symmetric in z, so write it in |z| where exp(-|z|) cannot overflow
        az = np.abs(z)
        val = -az - np.log(scale) - 2.0 * np.log1p(np.exp(-az))
        grads: dict[str, Array] = {}
        if wrt:
            t = np.tanh(0.5 * z)
            if "x" in wrt:
                grads["x"] = -t / scale
            if "location" in wrt:
                grads["location"] = t / scale
            if "scale" in wrt:
                grads["scale"] = (z * t - 1.0) / scale
        return val, grads, None if positive(scale) else mask_or_none(~(scale > 0))

    def _sample(self, rng, shape, location, scale):
        return rng.logistic(np.broadcast_to(location, shape), scale)


class Lognormal(Distribution):
    name = "lognormal"
    arguments = ("log_location", "log_scale")
    variate_kind = "positive"
    argument_support = {"log_location": "real", "log_scale": "positive"}

    def _log_density_and_pointwise(self, x, log_location, log_scale, wrt) -> Pointwise:
        y = np.log(x)
        z = (y - log_location) / log_scale
        val = -0.5 * (z * z) - np.log(log_scale) - 0.5 * LOG_2PI - y
        grads: dict[str, Array] = {}
        if wrt:
            dz = z / log_scale
            if "x" in wrt:
                grads["x"] = (-dz - 1.0) / x
            if "log_location" in wrt:
                grads["log_location"] = dz
            if "log_scale" in wrt:
                grads["log_scale"] = (z * z - 1.0) / log_scale
        return val, grads, (
            None if positive(log_scale, x) else mask_or_none(~(log_scale > 0) | ~(x > 0))
        )

    def _sample(self, rng, shape, log_location, log_scale):
        return np.exp(log_location + log_scale * rng.standard_normal(shape))


class Exponential(Distribution):
    name = "exponential"
    arguments = ("rate",)
    variate_kind = "nonnegative"
    argument_support = {"rate": "positive"}

    def _log_density_and_pointwise(self, x, rate, wrt) -> Pointwise:
        val = np.log(rate) - rate * x
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = -rate
        if "rate" in wrt:
            grads["rate"] = 1.0 / rate - x
        return val, grads, (
            None if positive(rate) and nonnegative(x) else mask_or_none(~(rate > 0) | ~(x >= 0))
        )

    def _sample(self, rng, shape, rate):
        return rng.standard_exponential(shape) / rate


class Gamma(Distribution):
    name = "gamma"
    arguments = ("shape", "rate")
    variate_kind = "positive"
    argument_support = {"shape": "positive", "rate": "positive"}

    def _log_density_and_pointwise(self, x, shape, rate, wrt) -> Pointwise:
        log_rate = np.log(rate)
        # xlogy keeps shape = 1 finite at x = 0 (the exponential density's value there)
        val = shape * log_rate - gammaln(shape) + xlogy(shape - 1.0, x) - rate * x
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = (shape - 1.0) / x - rate
        if "shape" in wrt:
            grads["shape"] = log_rate - digamma(shape) + np.log(x)
        if "rate" in wrt:
            grads["rate"] = shape / rate - x
        return val, grads, (
            None if positive(shape, rate) and nonnegative(x)
            else mask_or_none(~(shape > 0) | ~(rate > 0) | ~(x >= 0))
        )

    def _sample(self, rng, shape_out, shape, rate):
        return rng.standard_gamma(np.broadcast_to(shape, shape_out)) / rate


class InverseGamma(Distribution):
    name = "inverse_gamma"
    arguments = ("shape", "scale")
    variate_kind = "positive"
    argument_support = {"shape": "positive", "scale": "positive"}

    def _log_density_and_pointwise(self, x, shape, scale, wrt) -> Pointwise:
        log_scale = np.log(scale)
        log_x = np.log(x)
        inv_x = 1.0 / x
        val = shape * log_scale - gammaln(shape) - (shape + 1.0) * log_x - scale * inv_x
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = (scale * inv_x - (shape + 1.0)) * inv_x
        if "shape" in wrt:
            grads["shape"] = log_scale - digamma(shape) - log_x
        if "scale" in wrt:
            grads["scale"] = shape / scale - inv_x
        return val, grads, (
            None if positive(shape, scale, x)
            else mask_or_none(~(shape > 0) | ~(scale > 0) | ~(x > 0))
        )

    def _sample(self, rng, shape_out, shape, scale):
        return scale / rng.standard_gamma(np.broadcast_to(shape, shape_out))


class Weibull(Distribution):
    name = "weibull"
    arguments = ("shape", "scale")
    variate_kind = "positive"
    argument_support = {"shape": "positive", "scale": "positive"}

    def _log_density_and_pointwise(self, x, shape, scale, wrt) -> Pointwise:
        t = x / scale
        log_t = np.log(t)
        tk = np.exp(shape * log_t)
        val = np.log(shape) - np.log(scale) + xlogy(shape - 1.0, t) - tk
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = (shape - 1.0 - shape * tk) / x
        if "shape" in wrt:
            grads["shape"] = 1.0 / shape + log_t * (1.0 - tk)
        if "scale" in wrt:
            grads["scale"] = shape * (tk - 1.0) / scale
        return val, grads, (
            None if positive(shape, scale) and nonnegative(x)
            else mask_or_none(~(shape > 0) | ~(scale > 0) | ~(x >= 0))
        )

    def _sample(self, rng, shape_out, shape, scale):
        return scale * rng.weibull(np.broadcast_to(shape, shape_out))


class Beta(Distribution):
    name = "beta"
    arguments = ("a", "b")
    variate_kind = "unit"
    argument_support = {"a": "positive", "b": "positive"}

    def _log_density_and_pointwise(self, x, a, b, wrt) -> Pointwise:
        val = xlogy(a - 1.0, x) + xlog1py(b - 1.0, -x) - betaln(a, b)
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = (a - 1.0) / x - (b - 1.0) / (1.0 - x)
        if "a" in wrt or "b" in wrt:
            d_ab = digamma(a + b)
            if "a" in wrt:
                grads["a"] = np.log(x) - digamma(a) + d_ab
            if "b" in wrt:
                grads["b"] = np.log1p(-x) - digamma(b) + d_ab
        return val, grads, (
            None if positive(a, b) and nonnegative(x, 1.0 - x)
            else mask_or_none(~(a > 0) | ~(b > 0) | ~((x >= 0) & (x <= 1)))
        )

    def _sample(self, rng, shape, a, b):
        return rng.beta(np.broadcast_to(a, shape), b)


class Uniform(Distribution):
    name = "uniform"
    arguments = ("lower", "upper")
    variate_kind = "interval"
    argument_support = {"lower": "real", "upper": "real"}

    def _log_density_and_pointwise(self, x, lower, upper, wrt) -> Pointwise:
        width = upper - lower
        # the density does not involve x, so broadcast with it to give the batch shape
        val = np.broadcast_to(-np.log(width), np.broadcast_shapes(np.shape(x), np.shape(width)))
        grads: dict[str, Array] = {}
        if "x" in wrt:
            grads["x"] = np.zeros(val.shape)
        if "lower" in wrt:
            grads["lower"] = 1.0 / width
        if "upper" in wrt:
            grads["upper"] = -1.0 / width
        bad = ~(width > 0) | ~((x >= lower) & (x <= upper))
        return np.array(val), grads, mask_or_none(bad)

    def _sample(self, rng, shape, lower, upper):
        return lower + (upper - lower) * rng.random(shape)


class Gumbel(Distribution):
    """Largest-extreme-value distribution: log p = -log s - z - exp(-z), z = (x - m) / s."""

    name = "gumbel"
    arguments = ("location", "scale")
    argument_support = {"location": "real", "scale": "positive"}

    def _log_density_and_pointwise(self, x, location, scale, wrt) -> Pointwise:
        z = (x - location) / scale
        tail = np.exp(-z)
        val = -np.log(scale) - z - tail
        grads: dict[str, Array] = {}
        if wrt:
            dz = (tail - 1.0) / scale              # d value / dx
            if "x" in wrt:
                grads["x"] = dz
            if "location" in wrt:
                grads["location"] = -dz
            if "scale" in wrt:
                grads["scale"] = (z * (1.0 - tail) - 1.0) / scale
        return val, grads, None if positive(scale) else mask_or_none(~(scale > 0))

    def _sample(self, rng, shape, location, scale):
        return rng.gumbel(np.broadcast_to(location, shape), scale)


class SkewNormal(Distribution):
    """Azzalini (1985): p(x) = (2 / s) phi(z) Phi(alpha z), z = (x - m) / s; alpha = 0 is the
    normal, the sign of alpha the direction of the skew."""

    name = "skew_normal"
    arguments = ("location", "scale", "shape")
    argument_support = {"location": "real", "scale": "positive", "shape": "real"}

    def _log_density_and_pointwise(self, x, location, scale, shape, wrt) -> Pointwise:
        z = (x - location) / scale
        w = shape * z
        log_cdf = log_ndtr(w)
        val = LOG_2 - np.log(scale) - 0.5 * (z * z) - 0.5 * LOG_2PI + log_cdf
        grads: dict[str, Array] = {}
        if wrt:
            # phi(w) / Phi(w) in log space, finite far into the lower tail
            mills = np.exp(-0.5 * (w * w) - 0.5 * LOG_2PI - log_cdf)
            dz = -z + shape * mills                # d value / dz
            if "x" in wrt:
                grads["x"] = dz / scale
            if "location" in wrt:
                grads["location"] = -dz / scale
            if "scale" in wrt:
                grads["scale"] = (-1.0 - z * dz) / scale
            if "shape" in wrt:
                grads["shape"] = z * mills
        return val, grads, None if positive(scale) else mask_or_none(~(scale > 0))

    def _sample(self, rng, shape_out, location, scale, shape):
        # |U| delta + sqrt(1 - delta^2) V, delta = alpha / sqrt(1 + alpha^2) (Azzalini 1985)
        delta = shape / np.sqrt(1.0 + shape * shape)
        u = np.abs(rng.standard_normal(shape_out))
        v = rng.standard_normal(shape_out)
        return location + scale * (delta * u + np.sqrt(1.0 - delta * delta) * v)
