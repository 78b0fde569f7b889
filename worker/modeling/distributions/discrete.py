"""Distributions of observed counts, binary outcomes and categories.

Each probability argument has a log-odds alternative evaluated through softplus and the logistic
function, so large linear predictors neither overflow nor lose precision.
"""

from __future__ import annotations

import numpy as np
from scipy.special import gammaln, xlog1py, xlogy

from ..special import expit, softplus
from .base import Array, Distribution, mask_or_none

Pointwise = tuple[Array, dict[str, Array], Array | None]


def _not_binary(x: Array) -> Array:
    return ~((x == 0) | (x == 1))


def _not_count(x: Array) -> Array:
    return ~((x >= 0) & (x == np.floor(x)))


class BernoulliProbability(Distribution):
    name = "bernoulli"
    arguments = ("probability",)
    variate_kind = "binary"
    argument_support = {"probability": "unit"}
    discrete = True

    def _log_density_and_pointwise(self, x, probability, wrt) -> Pointwise:
        p = probability
        val = xlogy(x, p) + xlog1py(1 - x, -p)
        grads: dict[str, Array] = {}
        if "probability" in wrt:
            grads["probability"] = x / p - (1 - x) / (1 - p)
        return val, grads, mask_or_none(_not_binary(x) | ~((p >= 0) & (p <= 1)))

    def _sample(self, rng, shape, probability):
        return (rng.random(shape) < probability).astype(np.int64)


class BernoulliLogOdds(Distribution):
    name = "bernoulli"
    arguments = ("log_odds",)
    variate_kind = "binary"
    argument_support = {"log_odds": "real"}
    discrete = True

    def _log_density_and_pointwise(self, x, log_odds, wrt) -> Pointwise:
        val = x * log_odds - softplus(log_odds)
        grads: dict[str, Array] = {}
        if "log_odds" in wrt:
            grads["log_odds"] = x - expit(log_odds)
        return val, grads, mask_or_none(_not_binary(x))

    def _sample(self, rng, shape, log_odds):
        return (rng.random(shape) < expit(log_odds)).astype(np.int64)


class PoissonRate(Distribution):
    name = "poisson"
    arguments = ("rate",)
    variate_kind = "nonnegative_integer"
    argument_support = {"rate": "nonnegative"}
    discrete = True

    def _log_density_and_pointwise(self, x, rate, wrt) -> Pointwise:
        val = xlogy(x, rate) - rate - gammaln(x + 1.0)
        grads: dict[str, Array] = {}
        if "rate" in wrt:
            grads["rate"] = x / rate - 1.0
        return val, grads, mask_or_none(_not_count(x) | ~(rate >= 0))

    def _sample(self, rng, shape, rate):
        return rng.poisson(np.broadcast_to(rate, shape)).astype(np.int64)


class PoissonLogRate(Distribution):
    name = "poisson"
    arguments = ("log_rate",)
    variate_kind = "nonnegative_integer"
    argument_support = {"log_rate": "real"}
    discrete = True

    def _log_density_and_pointwise(self, x, log_rate, wrt) -> Pointwise:
        rate = np.exp(log_rate)
        val = x * log_rate - rate - gammaln(x + 1.0)
        grads: dict[str, Array] = {}
        if "log_rate" in wrt:
            grads["log_rate"] = x - rate
        return val, grads, mask_or_none(_not_count(x))

    def _sample(self, rng, shape, log_rate):
        return rng.poisson(np.broadcast_to(np.exp(log_rate), shape)).astype(np.int64)
