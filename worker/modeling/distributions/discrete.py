"""Distributions of observed counts, binary outcomes and categories.

Each probability argument has a log-odds alternative evaluated through softplus and the logistic
function, so large linear predictors neither overflow nor lose precision.
"""

from __future__ import annotations

import numpy as np
from scipy.special import betaln, digamma, gammaln, xlog1py, xlogy

from ..special import expit, max_last, softmax, softplus, sum_last
from .base import (
    STRUCTURE_TOLERANCE,
    Array,
    Distribution,
    Summed,
    binary,
    counts,
    mask_or_none,
    nonnegative,
    positive,
)

Pointwise = tuple[Array, dict[str, Array], Array | None]


def _not_binary(x: Array) -> Array:
    return ~((x == 0) | (x == 1))


def _not_count(x: Array) -> Array:
    return ~((x >= 0) & (x == np.floor(x)))


def _not_category(x: Array, k: int) -> Array:
    return ~((x >= 1) & (x <= k) & (x == np.floor(x)))


def categories(x: Array, k: int) -> bool:
    """Every element an integer in 1..k (two reductions for integer data)."""
    if x.size == 0:
        return True
    if x.dtype.kind in "iu":
        return bool(x.min() >= 1 and x.max() <= k)
    return not bool(np.any(_not_category(x, k)))


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
        if binary(x) and nonnegative(p, 1.0 - p):
            return val, grads, None
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
        return val, grads, None if binary(x) else mask_or_none(_not_binary(x))

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
        if counts(x) and nonnegative(rate):
            return val, grads, None
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
        return val, grads, None if counts(x) else mask_or_none(_not_count(x))

    def _sample(self, rng, shape, log_rate):
        return rng.poisson(np.broadcast_to(np.exp(log_rate), shape)).astype(np.int64)


def _binomial_coefficient(x: Array, trials: Array) -> Array:
    return gammaln(trials + 1.0) - gammaln(x + 1.0) - gammaln(trials - x + 1.0)


def _not_count_up_to(x: Array, trials: Array) -> Array:
    return ~((x >= 0) & (x <= trials) & (x == np.floor(x)) & (trials == np.floor(trials)))


class BinomialProbability(Distribution):
    name = "binomial"
    arguments = ("trials", "probability")
    variate_kind = "count_up_to_trials"
    argument_support = {"trials": "nonnegative_integer", "probability": "unit"}
    discrete = True

    def _log_density_and_pointwise(self, x, trials, probability, wrt) -> Pointwise:
        p = probability
        failures = trials - x
        val = _binomial_coefficient(x, trials) + xlogy(x, p) + xlog1py(failures, -p)
        grads: dict[str, Array] = {}
        if "probability" in wrt:
            grads["probability"] = x / p - failures / (1.0 - p)
        if "trials" in wrt:
            grads["trials"] = np.zeros(np.shape(trials))
        bad = _not_count_up_to(x, trials) | ~((p >= 0) & (p <= 1))
        return val, grads, mask_or_none(bad)

    def _sample(self, rng, shape, trials, probability):
        return rng.binomial(np.broadcast_to(trials, shape).astype(np.int64), probability)


class BinomialLogOdds(Distribution):
    name = "binomial"
    arguments = ("trials", "log_odds")
    variate_kind = "count_up_to_trials"
    argument_support = {"trials": "nonnegative_integer", "log_odds": "real"}
    discrete = True

    def _log_density_and_pointwise(self, x, trials, log_odds, wrt) -> Pointwise:
        val = _binomial_coefficient(x, trials) + x * log_odds - trials * softplus(log_odds)
        grads: dict[str, Array] = {}
        if "log_odds" in wrt:
            grads["log_odds"] = x - trials * expit(log_odds)
        if "trials" in wrt:
            grads["trials"] = np.zeros(np.shape(trials))
        return val, grads, mask_or_none(_not_count_up_to(x, trials))

    def _sample(self, rng, shape, trials, log_odds):
        n = np.broadcast_to(trials, shape).astype(np.int64)
        return rng.binomial(n, expit(log_odds))


def _negative_binomial(x, dispersion, x_log_mean, log_total, mean, wrt, mean_key):
    """Mass and pointwise gradients given x log(mean), log(mean + dispersion) and mean.

    log p = lgamma(x + phi) - lgamma(phi) - lgamma(x + 1) + phi log(phi / (mu + phi))
            + x log(mu / (mu + phi)),   variance mu + mu^2 / phi.
    """
    log_phi = np.log(dispersion)
    log_share = log_phi - log_total            # log(phi / (mu + phi))
    val = (
        gammaln(x + dispersion) - gammaln(dispersion) - gammaln(x + 1.0)
        + dispersion * log_share + x_log_mean - x * log_total
    )
    grads: dict[str, Array] = {}
    if wrt:
        share = np.exp(log_share)
        weight = (dispersion + x) * share / dispersion     # (phi + x) / (mu + phi)
        if mean_key in wrt:
            if mean_key == "mean":
                grads["mean"] = x / mean - weight
            else:
                grads["log_mean"] = x - weight * mean
        if "dispersion" in wrt:
            grads["dispersion"] = (
                digamma(x + dispersion) - digamma(dispersion) + log_share + 1.0 - weight
            )
    return val, grads


class NegativeBinomialMean(Distribution):
    name = "negative_binomial"
    arguments = ("mean", "dispersion")
    variate_kind = "nonnegative_integer"
    argument_support = {"mean": "positive", "dispersion": "positive"}
    discrete = True

    def _log_density_and_pointwise(self, x, mean, dispersion, wrt) -> Pointwise:
        log_total = np.log(mean + dispersion)
        val, grads = _negative_binomial(
            x, dispersion, xlogy(x, mean), log_total, mean, wrt, "mean"
        )
        if counts(x) and positive(mean, dispersion):
            return val, grads, None
        bad = _not_count(x) | ~(mean > 0) | ~(dispersion > 0)
        return val, grads, mask_or_none(bad)

    def _sample(self, rng, shape, mean, dispersion):
        # gamma-Poisson mixture: the rate is Gamma(phi, phi / mu)
        rate = rng.standard_gamma(np.broadcast_to(dispersion, shape)) * (mean / dispersion)
        return rng.poisson(rate).astype(np.int64)


class NegativeBinomialLogMean(Distribution):
    name = "negative_binomial"
    arguments = ("log_mean", "dispersion")
    variate_kind = "nonnegative_integer"
    argument_support = {"log_mean": "real", "dispersion": "positive"}
    discrete = True

    def _log_density_and_pointwise(self, x, log_mean, dispersion, wrt) -> Pointwise:
        log_total = np.logaddexp(log_mean, np.log(dispersion))
        mean = np.exp(log_mean)
        val, grads = _negative_binomial(
            x, dispersion, x * log_mean, log_total, mean, wrt, "log_mean"
        )
        if counts(x) and positive(dispersion):
            return val, grads, None
        return val, grads, mask_or_none(_not_count(x) | ~(dispersion > 0))

    def _sample(self, rng, shape, log_mean, dispersion):
        rate = rng.standard_gamma(np.broadcast_to(dispersion, shape)) * np.exp(
            log_mean - np.log(dispersion)
        )
        return rng.poisson(rate).astype(np.int64)


class Categorical(Distribution):
    """Outcomes 1..K with probabilities softmax(log_weights) over the last axis."""

    name = "categorical"
    arguments = ("log_weights",)
    variate_kind = "category"
    argument_support = {"log_weights": "real"}
    argument_event_ndim = {"log_weights": 1}
    discrete = True

    def category_count(self, args):
        return int(np.shape(args["log_weights"])[-1])

    def _log_density_and_pointwise(self, x, log_weights, wrt) -> Pointwise:
        k = log_weights.shape[-1]
        batch = np.broadcast_shapes(x.shape, log_weights.shape[:-1])
        w = np.broadcast_to(log_weights, batch + (k,))
        bad = None if categories(x, k) else _not_category(x, k)
        index = (x if bad is None else np.where(bad, 1, x)).astype(np.intp) - 1
        index = np.broadcast_to(index, batch).ravel()
        top = max_last(w)
        top = np.where(np.isfinite(top), top, 0.0)
        shifted = np.exp(w - top[..., None])
        total = sum_last(shifted)
        # pick each row's own category through flat indices (faster than take_along_axis)
        flat = np.arange(index.size) * k + index
        picked = w.reshape(-1)[flat].reshape(batch)
        val = picked - top - np.log(total)
        grads: dict[str, Array] = {}
        if "log_weights" in wrt:
            # C order, so that reshape(-1) is a view: log weights passed in another order give
            # a Fortran-ordered quotient, whose reshape is a copy that would drop the += 1
            g = np.ascontiguousarray(shifted / (-total[..., None]))
            g.reshape(-1)[flat] += 1.0
            grads["log_weights"] = g
        if bad is not None:
            bad = mask_or_none(np.broadcast_to(bad, batch))
        return val, grads, bad

    def _sample(self, rng, shape, log_weights):
        k = log_weights.shape[-1]
        # Gumbel-max: argmax of log weights plus standard Gumbel noise is a categorical draw
        noisy = log_weights + rng.gumbel(size=tuple(shape) + (k,))
        return np.argmax(noisy, axis=-1).astype(np.int64) + 1

    def _default_shape(self, values):
        return values[0].shape[:-1]


class CumulativeLogit(Distribution):
    """Outcomes 1..K+1: P(y = k) = logistic(eta - c[k-1]) - logistic(eta - c[k]), c[0] = -inf,
    c[K+1] = +inf (McCullagh 1980, proportional odds)."""

    name = "cumulative_logit"
    arguments = ("predictor", "cutpoints")
    variate_kind = "category"
    argument_support = {"predictor": "real", "cutpoints": "ordered"}
    argument_event_ndim = {"cutpoints": 1}
    discrete = True

    def category_count(self, args):
        return int(np.shape(args["cutpoints"])[-1]) + 1

    def _log_density_and_pointwise(self, x, predictor, cutpoints, wrt) -> Pointwise:
        k = cutpoints.shape[-1]
        batch = np.broadcast_shapes(x.shape, predictor.shape, cutpoints.shape[:-1])
        if categories(x, k + 1) and (k < 2 or bool(np.all(np.diff(cutpoints, axis=-1) > 0))):
            bad = None
            outcome = np.broadcast_to(x.astype(np.intp), batch)
        else:
            bad = _not_category(x, k + 1) | np.any(~(np.diff(cutpoints, axis=-1) > 0), axis=-1)
            bad = np.broadcast_to(bad, batch)
            outcome = np.broadcast_to(np.where(bad, 1, x).astype(np.intp), batch)
        pad_shape = cutpoints.shape[:-1] + (1,)
        padded = np.concatenate(
            [np.full(pad_shape, -np.inf), cutpoints, np.full(pad_shape, np.inf)], axis=-1
        )
        if padded.ndim == 1:
            low_cut = padded[outcome - 1]
            high_cut = padded[outcome]
        else:
            full = np.broadcast_to(padded, batch + (k + 2,))
            low_cut = np.take_along_axis(full, (outcome - 1)[..., None], -1)[..., 0]
            high_cut = np.take_along_axis(full, outcome[..., None], -1)[..., 0]
        above = predictor - low_cut      # +inf for the lowest outcome
        below = predictor - high_cut     # -inf for the highest outcome
        gap = high_cut - low_cut
        # p = logistic(above) (1 - logistic(below)) (1 - exp(-gap)), each factor in log space
        val = -softplus(-above) - softplus(below) + np.log(-np.expm1(-gap))
        grads: dict[str, Array] = {}
        if "predictor" in wrt or "cutpoints" in wrt:
            inv = 1.0 / np.expm1(gap)
            d_above = expit(-above) + inv
            d_below = -expit(below) - inv
            if "predictor" in wrt:
                grads["predictor"] = d_above + d_below
            if "cutpoints" in wrt:
                grads["cutpoints"] = self._scatter(
                    outcome, -d_above, -d_below, k, batch, padded.ndim == 1, bad
                )
        return val, grads, None if bad is None else mask_or_none(bad)

    @staticmethod
    def _scatter(outcome, d_low, d_high, k, batch, shared, bad):
        """Cutpoint gradients: outcome y touches padded cutpoints y - 1 (low) and y (high)."""
        d_low = np.broadcast_to(d_low, batch)
        d_high = np.broadcast_to(d_high, batch)
        if shared:
            # one cutpoint vector for the whole batch: sum by index in a single pass
            if bad is not None:
                d_low = np.where(bad, 0.0, d_low)
                d_high = np.where(bad, 0.0, d_high)
            total = np.bincount(outcome.ravel() - 1, d_low.ravel(), minlength=k + 2)
            total += np.bincount(outcome.ravel(), d_high.ravel(), minlength=k + 2)
            return Summed(total[1 : k + 1])
        g = np.zeros(batch + (k + 2,))
        np.put_along_axis(g, (outcome - 1)[..., None], d_low[..., None], -1)
        np.put_along_axis(g, outcome[..., None], d_high[..., None], -1)
        return g[..., 1 : k + 1]

    def _sample(self, rng, shape, predictor, cutpoints):
        # latent-variable form: y = 1 + #{k : eta + logistic noise > c_k}
        latent = predictor + rng.logistic(size=shape)
        return 1 + np.sum(latent[..., None] > cutpoints, axis=-1).astype(np.int64)

    def _default_shape(self, values):
        return np.broadcast_shapes(values[0].shape, values[1].shape[:-1])


def _multinomial_bad(x: Array, trials: Array) -> Array:
    """Per event: some count is not a non-negative integer, or the counts do not add to trials."""
    return np.any(_not_count(x), axis=-1) | ~(np.sum(x, axis=-1) == trials) | _not_count(trials)


class _Multinomial(Distribution):
    """Counts of K outcomes in `trials` independent draws, one event per last axis:
    log p = lgamma(n + 1) - sum_k lgamma(x_k + 1) + sum_k x_k log p_k (Johnson, Kotz &
    Balakrishnan 1997, Discrete Multivariate Distributions, ch. 35)."""

    name = "multinomial"
    variate_kind = "counts_summing_to_trials"
    event_ndim = 1
    discrete = True

    def _coefficient(self, x: Array, trials: Array) -> Array:
        return gammaln(trials + 1.0) - sum_last(gammaln(x + 1.0))

    def _default_shape(self, values):
        trials, weights = values
        return np.broadcast_shapes(trials.shape, weights.shape[:-1]) + (weights.shape[-1],)

    def _draw(self, rng, shape, trials, probability):
        n = np.broadcast_to(trials, shape[:-1]).astype(np.int64)
        return rng.multinomial(n, probability, size=shape[:-1]).astype(np.int64)


class MultinomialProbability(_Multinomial):
    arguments = ("trials", "probability")
    argument_support = {"trials": "nonnegative_integer", "probability": "simplex"}
    argument_event_ndim = {"probability": 1}

    def _log_density_and_pointwise(self, x, trials, probability, wrt) -> Pointwise:
        p = probability
        val = self._coefficient(x, trials) + sum_last(xlogy(x, p))
        grads: dict[str, Array] = {}
        if "probability" in wrt:
            # x / p, with a zero count contributing nothing even where p is 0
            grads["probability"] = np.where(x == 0, 0.0, x / p)
        if "trials" in wrt:
            grads["trials"] = np.zeros(np.shape(trials))
        off_simplex = np.any(~(p >= 0), axis=-1) | ~(
            np.abs(np.sum(p, axis=-1) - 1.0) <= STRUCTURE_TOLERANCE * p.shape[-1])
        bad = np.broadcast_to(_multinomial_bad(x, trials) | off_simplex, np.shape(val))
        return val, grads, mask_or_none(bad)

    def _sample(self, rng, shape, trials, probability):
        return self._draw(rng, shape, trials, probability)


class MultinomialLogWeights(_Multinomial):
    """Probabilities softmax(log_weights) over the last axis."""

    arguments = ("trials", "log_weights")
    argument_support = {"trials": "nonnegative_integer", "log_weights": "real"}
    argument_event_ndim = {"log_weights": 1}

    def _log_density_and_pointwise(self, x, trials, log_weights, wrt) -> Pointwise:
        w = log_weights
        top = max_last(w)
        top = np.where(np.isfinite(top), top, 0.0)
        shifted = np.exp(w - top[..., None])
        total = sum_last(shifted)
        log_total = top + np.log(total)
        n = np.sum(x, axis=-1)
        val = self._coefficient(x, trials) + sum_last(x * w) - n * log_total
        grads: dict[str, Array] = {}
        if "log_weights" in wrt:
            grads["log_weights"] = x - (n / total)[..., None] * shifted
        if "trials" in wrt:
            grads["trials"] = np.zeros(np.shape(trials))
        bad = np.broadcast_to(_multinomial_bad(x, trials), np.shape(val))
        return val, grads, mask_or_none(bad)

    def _sample(self, rng, shape, trials, log_weights):
        return self._draw(rng, shape, trials, softmax(log_weights))


class BetaBinomial(Distribution):
    """Binomial counts whose probability is Beta(a, b) distributed:
    log p = log C(n, x) + log B(x + a, n - x + b) - log B(a, b)."""

    name = "beta_binomial"
    arguments = ("trials", "a", "b")
    variate_kind = "count_up_to_trials"
    argument_support = {"trials": "nonnegative_integer", "a": "positive", "b": "positive"}
    discrete = True

    def _log_density_and_pointwise(self, x, trials, a, b, wrt) -> Pointwise:
        failures = trials - x
        val = (_binomial_coefficient(x, trials) + betaln(x + a, failures + b) - betaln(a, b))
        grads: dict[str, Array] = {}
        if "a" in wrt or "b" in wrt:
            common = digamma(a + b) - digamma(trials + a + b)
            if "a" in wrt:
                grads["a"] = digamma(x + a) - digamma(a) + common
            if "b" in wrt:
                grads["b"] = digamma(failures + b) - digamma(b) + common
        if "trials" in wrt:
            grads["trials"] = np.zeros(np.shape(trials))
        bad = _not_count_up_to(x, trials) | ~(a > 0) | ~(b > 0)
        return val, grads, mask_or_none(bad)

    def _sample(self, rng, shape, trials, a, b):
        p = rng.beta(np.broadcast_to(a, shape), np.broadcast_to(b, shape))
        return rng.binomial(np.broadcast_to(trials, shape).astype(np.int64), p)


class ZeroInflatedPoisson(Distribution):
    """A zero with probability pi, else a Poisson(rate) count (Lambert 1992):
    p(0) = pi + (1 - pi) exp(-rate), p(x > 0) = (1 - pi) rate^x exp(-rate) / x!."""

    name = "zero_inflated_poisson"
    arguments = ("zero_probability", "rate")
    variate_kind = "nonnegative_integer"
    argument_support = {"zero_probability": "unit", "rate": "nonnegative"}
    discrete = True

    def _log_density_and_pointwise(self, x, zero_probability, rate, wrt) -> Pointwise:
        pi = zero_probability
        zero = x == 0
        keep = np.log1p(-pi)
        poisson = xlogy(x, rate) - rate - gammaln(x + 1.0)
        # log(pi + (1 - pi) exp(-rate)) without cancellation when pi is tiny or rate large
        at_zero = np.logaddexp(np.log(pi), keep - rate)
        val = np.where(zero, at_zero, keep + poisson)
        grads: dict[str, Array] = {}
        if wrt:
            # share of a zero's probability that comes from the Poisson part
            from_poisson = np.exp(keep - rate - at_zero)
            if "zero_probability" in wrt:
                grads["zero_probability"] = np.where(
                    zero, (1.0 - np.exp(-rate)) * np.exp(-at_zero), -1.0 / (1.0 - pi))
            if "rate" in wrt:
                grads["rate"] = np.where(zero, -from_poisson, x / rate - 1.0)
        if counts(x) and nonnegative(pi, 1.0 - pi, rate):
            return val, grads, None
        return val, grads, mask_or_none(_not_count(x) | ~((pi >= 0) & (pi <= 1)) | ~(rate >= 0))

    def _sample(self, rng, shape, zero_probability, rate):
        counts_ = rng.poisson(np.broadcast_to(rate, shape))
        return np.where(rng.random(shape) < zero_probability, 0, counts_).astype(np.int64)
