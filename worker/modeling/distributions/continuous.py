"""Continuous distributions on the real line, the half line and intervals.

Formulas are the standard densities (e.g. Johnson, Kotz & Balakrishnan, Continuous Univariate
Distributions); gradients are their analytic derivatives, computed in the same pass as the value.
"""

from __future__ import annotations

import numpy as np

from ..special import LOG_2, LOG_2PI
from .base import Array, Distribution, mask_or_none

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
        return val, grads, mask_or_none(~(scale > 0))

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
        return val, grads, mask_or_none(~(scale > 0) | ~(x >= 0))

    def _sample(self, rng, shape, scale):
        return scale * np.abs(rng.standard_normal(shape))
