"""How a prior or likelihood term is evaluated inside the plan: generic, fused, or constant.

A generic term calls its distribution's log_density_and_gradients. The most common terms get a fused
kernel instead: a normal (fixed or varying scale), a half-normal with a fixed scale, a Bernoulli on
log-odds or a Poisson on log-rate observing data. Their constant parts (log scales, log factorials,
support checks on data) are settled once at compile time, so a call costs a handful of array
operations; for an 8-group hierarchical model the per-call overhead of the generic route is most of
the time. Terms that depend on no unknown at all are evaluated once and kept as a number.

A fused kernel over arrays computes into buffers it keeps from call to call, so the hot path
allocates nothing per element. The gradients it leaves in the adjoint list are those buffers: they
hold until the kernel's next run, and the plan consumes them within the same call (the gradient it
returns is a fresh array). value() never writes into a buffer that run() hands out.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import gammaln

from .graph import Graph
from .operations import sum_of_products

LOG_2PI = float(np.log(2.0 * np.pi))
LOG_2 = float(np.log(2.0))


_float64 = np.float64


def _accumulate(adjoint: list[Any], node: int, g: Any) -> None:
    previous = adjoint[node]
    adjoint[node] = g if previous is None else previous + g


def _compact(a: np.ndarray) -> Any:
    """A 0-d array as a numpy scalar (much cheaper arithmetic); other arrays unchanged."""
    a = np.asarray(a, dtype=float)
    return a[()] if a.ndim == 0 else a


def _reducer(shape: tuple[int, ...], batch: tuple[int, ...]):
    """A function taking a pointwise gradient over ``batch`` to an argument of ``shape``."""
    if shape == batch:
        return None
    return np.ndarray.sum


class GenericTerm:
    """Any distribution, through its own log_density_and_gradients.

    The argument mapping is built once; a call refreshes only the entries that depend on unknowns.
    """

    __slots__ = ("variate", "distribution", "wrt", "wanted", "args")

    def __init__(self, variate: int, distribution: Any, names: tuple[str, ...],
                 nodes: tuple[int, ...], graph: Graph):
        self.variate = variate
        self.distribution = distribution
        self.wanted = tuple((n, k) for n, k in zip(names, nodes, strict=True)
                            if not graph.nodes[k].constant)
        # a discrete distribution's variate varies only as an integer unknown, which is held
        # during the continuous step: it has no gradient to ask for
        self.wrt = frozenset([n for n, _ in self.wanted]
                             + ([] if graph.nodes[variate].constant or distribution.discrete
                                else ["x"]))
        self.args = {n: _compact(graph.nodes[k].value) for n, k in zip(names, nodes, strict=True)
                     if graph.nodes[k].constant}

    def _refresh(self, v: list[Any]) -> dict[str, Any]:
        args = self.args
        for name, node in self.wanted:
            args[name] = v[node]
        return args

    def value(self, v: list[Any]) -> float:
        return float(np.sum(self.distribution.log_density(v[self.variate], self._refresh(v))))

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        pointwise, grads = self.distribution.log_density_and_gradients(
            v[self.variate], self._refresh(v), self.wrt)
        for name, node in self.wanted:
            _accumulate(adjoint, node, grads[name])
        if "x" in self.wrt:
            _accumulate(adjoint, self.variate, grads["x"])
        return float(np.sum(pointwise))


class NormalFixedScale:
    """normal(x; location, scale), constant scale: c - sum(d^2 / scale^2)/2, d = x - location.

    One subtraction, one product and one dot product per call: w = d / scale^2 is at once the
    gradient with respect to the location and (negated) with respect to x. The difference is taken
    in the order that makes w the gradient of whichever of the two needs one (a prior's x, a
    likelihood's location), so only a term where both are unknowns pays for a negation; a unit
    scale skips the product. Array values are computed into buffers kept from call to call; a
    scalar term stays in numpy scalars.
    """

    __slots__ = ("first", "second", "first_needed", "first_reduce",
                 "second_reduce", "inverse_scale", "inverse_variance", "unit", "constant",
                 "scalar", "d", "w", "minus_w")

    def __init__(self, x: int, location: int, scale: np.ndarray, graph: Graph):
        batch = np.broadcast_shapes(graph.type_of(x).shape, graph.type_of(location).shape,
                                    scale.shape)
        x_needed = not graph.nodes[x].constant
        # d = v[first] - v[second]: w = d / scale^2 is d total / d second, -w is d / d first
        self.first, self.second = (location, x) if x_needed else (x, location)
        self.first_needed = x_needed and not graph.nodes[location].constant
        self.first_reduce = _reducer(graph.type_of(self.first).shape, batch)
        self.second_reduce = _reducer(graph.type_of(self.second).shape, batch)
        self.inverse_scale = _compact(1.0 / scale)
        self.inverse_variance = _compact(1.0 / (scale * scale))
        self.unit = bool(np.all(scale == 1.0))
        self.constant = float(-np.sum(np.broadcast_to(np.log(scale), batch))
                              - 0.5 * LOG_2PI * int(np.prod(batch, dtype=np.int64)))
        self.scalar = not batch
        self.d = self.w = self.minus_w = None
        if not self.scalar:
            self.d, self.w, self.minus_w = np.empty(batch), np.empty(batch), np.empty(batch)

    def value(self, v: list[Any]) -> float:
        if self.scalar:
            d = v[self.first] - v[self.second]
            return self.constant - 0.5 * float(d * d * self.inverse_variance)
        z = np.subtract(v[self.first], v[self.second], out=self.d)
        if not self.unit:
            z = np.multiply(z, self.inverse_scale, out=z)
        return self.constant - 0.5 * sum_of_products(z, z)

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        if self.scalar:
            d = v[self.first] - v[self.second]
            w = d * self.inverse_variance
            total = self.constant - 0.5 * float(d * w)
        else:
            # with a unit scale, w is d itself: then d goes straight into w's buffer
            d = np.subtract(v[self.first], v[self.second], out=self.w if self.unit else self.d)
            w = d if self.unit else np.multiply(d, self.inverse_variance, out=self.w)
            total = self.constant - 0.5 * sum_of_products(d, w)
        reduce = self.second_reduce
        _accumulate(adjoint, self.second, w if reduce is None else reduce(w))
        if self.first_needed:
            minus_w = -w if self.scalar else np.negative(w, out=self.minus_w)
            _accumulate(adjoint, self.first,
                        minus_w if self.first_reduce is None else self.first_reduce(minus_w))
        return total


class NormalVaryingScale:
    """normal(x; location, scale) whose scale depends on unknowns (a hierarchical prior).

    -inf when any scale is not positive; the gradients are the analytic ones: d/dx = -z/s,
    d/dlocation = z/s, d/dscale = (z^2 - 1)/s with z = (x - location)/s. A single scale over an
    array (a regression's residual scale) takes its gradient from sum(d^2) directly:
    (sum(d^2)/s^2 - n)/s, without an array of (z^2 - 1)/s.
    """

    __slots__ = ("x", "location", "scale", "count", "needed", "reducers", "batch",
                 "shared_scale", "d", "w", "minus_w")

    def __init__(self, x: int, location: int, scale: int, graph: Graph):
        shapes = [graph.type_of(n).shape for n in (x, location, scale)]
        self.batch = np.broadcast_shapes(*shapes)
        self.x, self.location, self.scale = x, location, scale
        self.count = int(np.prod(self.batch, dtype=np.int64))
        self.needed = tuple(not graph.nodes[n].constant for n in (x, location, scale))
        self.reducers = tuple(_reducer(shape, self.batch) for shape in shapes)
        self.shared_scale = bool(self.batch) and not shapes[2]
        self.d = self.w = self.minus_w = None
        if self.shared_scale:
            self.d, self.w, self.minus_w = (np.empty(self.batch) for _ in range(3))

    def _parts(self, v: list[Any]):
        s = v[self.scale]
        if np.any(s <= 0):
            return None
        z = (v[self.x] - v[self.location]) / s
        log_scale = np.log(s)
        log_scale_total = float(np.sum(log_scale)) * (
            1 if np.shape(s) == self.batch else self.count)
        total = -0.5 * float(np.sum(z * z)) - log_scale_total - 0.5 * LOG_2PI * self.count
        return s, z, total

    def _shared(self, v: list[Any]) -> tuple[float, float, float]:
        """(s, sum of squared residuals, total) for one positive scale over the batch."""
        s = float(v[self.scale])
        d = np.subtract(v[self.location], v[self.x], out=self.d)
        squares = sum_of_products(d, d)
        total = (-0.5 * squares / (s * s) - self.count * math.log(s)
                 - 0.5 * LOG_2PI * self.count)
        return s, squares, total

    def value(self, v: list[Any]) -> float:
        if self.shared_scale:
            return -np.inf if not v[self.scale] > 0 else self._shared(v)[2]
        parts = self._parts(v)
        return -np.inf if parts is None else parts[2]

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        if self.shared_scale:
            if not v[self.scale] > 0:
                return -np.inf
            s, squares, total = self._shared(v)
            x_needed, location_needed, scale_needed = self.needed
            w = np.multiply(self.d, 1.0 / (s * s), out=self.w)  # d/dx; minus d/dlocation
            if x_needed:
                reduce = self.reducers[0]
                _accumulate(adjoint, self.x, w if reduce is None else reduce(w))
            if location_needed:
                minus_w = np.negative(w, out=self.minus_w)
                reduce = self.reducers[1]
                _accumulate(adjoint, self.location, minus_w if reduce is None else reduce(minus_w))
            if scale_needed:
                _accumulate(adjoint, self.scale,
                            _float64((squares / (s * s) - self.count) / s))
            return total
        parts = self._parts(v)
        if parts is None:
            return -np.inf
        s, z, total = parts
        dz = z / s
        pointwise = (-dz, dz, (z * z - 1.0) / s)
        for node, need, reduce, g in zip((self.x, self.location, self.scale), self.needed,
                                         self.reducers, pointwise, strict=True):
            if need:
                _accumulate(adjoint, node, g if reduce is None else reduce(g))
        return total


class HalfNormalFixedScale:
    """half_normal(x; scale) with a constant scale; -inf when any x is negative."""

    __slots__ = ("x", "inverse_variance", "constant", "check_sign", "x_reduce", "scalar")

    def __init__(self, x: int, scale: np.ndarray, graph: Graph, sign_guaranteed: bool):
        shape = graph.type_of(x).shape
        batch = np.broadcast_shapes(shape, scale.shape)
        self.x = x
        self.inverse_variance = _compact(1.0 / (scale * scale))
        self.constant = float(np.sum(np.broadcast_to(LOG_2 - np.log(scale) - 0.5 * LOG_2PI,
                                                     batch)))
        self.check_sign = not sign_guaranteed
        self.x_reduce = _reducer(shape, batch)
        self.scalar = not batch

    def value(self, v: list[Any]) -> float:
        x = v[self.x]
        if self.check_sign and np.any(x < 0):
            return -np.inf
        return self.constant - 0.5 * float(np.sum(x * x * self.inverse_variance))

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        x = v[self.x]
        if self.check_sign and np.any(x < 0):
            return -np.inf
        g = x * self.inverse_variance
        total = self.constant - 0.5 * (float(g * x) if self.scalar else float(np.sum(g * x)))
        gx = -g
        _accumulate(adjoint, self.x, gx if self.x_reduce is None else self.x_reduce(gx))
        return total


class LogOddsCountsData:
    """bernoulli(y; log_odds) or binomial(y; trials, log_odds) for fixed data y (and trials n).

    log p = c + y . eta - sum(n softplus(eta)),  d/deta = y - n expit(eta),  in one pass of exp:
    with e = exp(-|eta|), softplus(eta) = max(eta, 0) + log1p(e), and q = e/(1 + e) = expit(-|eta|)
    <= 1/2 keeps full relative precision; expit(eta) is q where eta is negative and 1 - q
    elsewhere. With the exact integer part r0 = y - n [eta >= 0] (one sign test),
    y . eta - n . max(eta, 0) is the single dot product r0 . eta, and the residual is
    r0 + n copysign(q, eta). Every array lives in a buffer kept from call to call.
    """

    __slots__ = ("eta", "eta_reduce", "y", "trials", "y_minus_trials", "constant",
                 "a", "e", "r", "scratch", "negative")

    def __init__(self, y: np.ndarray, eta: int, graph: Graph, trials: np.ndarray | None = None,
                 constant: float = 0.0):
        batch = np.broadcast_shapes(y.shape, graph.type_of(eta).shape,
                                    () if trials is None else trials.shape)
        self.y = np.array(np.broadcast_to(y, batch), dtype=float)
        self.trials = None if trials is None else np.array(np.broadcast_to(trials, batch),
                                                           dtype=float)
        self.y_minus_trials = self.y - (1.0 if trials is None else self.trials)
        self.eta = eta
        self.eta_reduce = _reducer(graph.type_of(eta).shape, batch)
        self.constant = constant
        self.a, self.e, self.r, self.scratch = (np.empty(batch) for _ in range(4))
        self.negative = np.empty(batch, dtype=bool)

    def _eta(self, v: list[Any]) -> np.ndarray:
        eta = v[self.eta]
        return eta if self.eta_reduce is None else np.broadcast_to(eta, self.y.shape)

    def _value(self, eta: np.ndarray, r0: np.ndarray) -> float:
        """The log mass; leaves e = exp(-|eta|) in its buffer and y - n [eta >= 0] in r0."""
        a = np.abs(eta, out=self.a)
        e = np.exp(np.negative(a, out=self.e), out=self.e)
        negative = np.signbit(eta, out=self.negative)
        if self.trials is None:
            np.add(self.y_minus_trials, negative, out=r0)
            log1p_total = float(np.log1p(e, out=a).sum())
        else:
            np.add(self.y_minus_trials, np.multiply(self.trials, negative, out=r0), out=r0)
            log1p_total = sum_of_products(self.trials, np.log1p(e, out=a))
        return self.constant + sum_of_products(r0, eta) - log1p_total

    def value(self, v: list[Any]) -> float:
        return self._value(self._eta(v), self.scratch)

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        eta = self._eta(v)
        r = self.r
        total = self._value(eta, r)
        e = self.e
        q = np.copysign(np.divide(e, np.add(e, 1.0, out=self.a), out=e), eta, out=e)
        if self.trials is None:
            np.add(r, q, out=r)
        else:
            r += np.multiply(self.trials, q, out=q)
        _accumulate(adjoint, self.eta, r if self.eta_reduce is None else self.eta_reduce(r))
        return total


class PoissonLogRateData:
    """poisson(y; log_rate) for fixed counts y: y . r - sum(exp(r)) - sum(log y!).

    One exp per call, into a buffer that then becomes the gradient y - exp(r) in place.
    """

    __slots__ = ("y", "log_rate", "constant", "reduce", "rate", "scratch")

    def __init__(self, y: np.ndarray, log_rate: int, graph: Graph):
        batch = np.broadcast_shapes(y.shape, graph.type_of(log_rate).shape)
        self.y = np.array(np.broadcast_to(y, batch), dtype=float)
        self.log_rate = log_rate
        self.constant = -float(np.sum(gammaln(self.y + 1.0)))
        self.reduce = _reducer(graph.type_of(log_rate).shape, batch)
        self.rate, self.scratch = np.empty(batch), np.empty(batch)

    def _log_rate(self, v: list[Any]) -> np.ndarray:
        r = v[self.log_rate]
        return r if self.reduce is None else np.broadcast_to(r, self.y.shape)

    def value(self, v: list[Any]) -> float:
        r = self._log_rate(v)
        return (self.constant + sum_of_products(self.y, r)
                - float(np.exp(r, out=self.scratch).sum()))

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        r = self._log_rate(v)
        rate = np.exp(r, out=self.rate)
        total = self.constant + sum_of_products(self.y, r) - float(rate.sum())
        g = np.subtract(self.y, rate, out=rate)
        _accumulate(adjoint, self.log_rate, g if self.reduce is None else self.reduce(g))
        return total


class MultivariateNormalFixedFactor:
    """multivariate_normal(x; location, L) with a constant Cholesky factor L.

    L^-1 is formed once, so a call is two matrix-vector products (z = L^-1 d, w = L^-T z) instead
    of two triangular solves, whose call overhead dominates at the sizes models have.
    x and location are each one vector of length k or a batch of them (n, k) with the same n.
    """

    __slots__ = ("x", "location", "inverse_factor", "constant", "x_needed", "location_needed",
                 "x_reduce", "location_reduce")

    def __init__(self, x: int, location: int, factor: np.ndarray, graph: Graph):
        x_shape, location_shape = graph.type_of(x).shape, graph.type_of(location).shape
        batch = np.broadcast_shapes(x_shape, location_shape)
        k = factor.shape[-1]
        self.x, self.location = x, location
        self.inverse_factor = solve_triangular(np.tril(factor), np.eye(k), lower=True)
        count = int(np.prod(batch[:-1], dtype=np.int64))
        self.constant = count * (-0.5 * k * LOG_2PI - float(np.sum(np.log(np.diag(factor)))))
        self.x_needed = not graph.nodes[x].constant
        self.location_needed = not graph.nodes[location].constant
        self.x_reduce = x_shape != batch
        self.location_reduce = location_shape != batch

    @staticmethod
    def applies(x_shape: tuple[int, ...], location_shape: tuple[int, ...],
                factor: np.ndarray) -> bool:
        """Shapes this kernel handles, and a factor the density is finite for."""
        if factor.ndim != 2 or not factor.shape[0] == factor.shape[1] >= 1:
            return False
        k = factor.shape[0]
        shapes_fit = all(len(s) in (1, 2) and s[-1] == k for s in (x_shape, location_shape)) \
            and (len(x_shape) == 1 or len(location_shape) == 1 or x_shape == location_shape)
        diagonal = np.diag(factor)
        return shapes_fit and bool(np.all(np.isfinite(factor)) and np.all(diagonal > 0))

    def _z(self, v: list[Any]) -> np.ndarray:
        d = v[self.x] - v[self.location]
        return d @ self.inverse_factor.T

    def value(self, v: list[Any]) -> float:
        z = self._z(v)
        return self.constant - 0.5 * sum_of_products(z, z)

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        z = self._z(v)
        total = self.constant - 0.5 * sum_of_products(z, z)
        w = z @ self.inverse_factor  # L^-T z, row by row; d/dlocation, and -d/dx
        if self.location_needed:
            _accumulate(adjoint, self.location, w.sum(axis=0) if self.location_reduce else w)
        if self.x_needed:
            gx = -w
            _accumulate(adjoint, self.x, gx.sum(axis=0) if self.x_reduce else gx)
        return total


def term_kernel(variate: int, distribution: Any, names: tuple[str, ...],
                nodes: tuple[int, ...], graph: Graph, sign_guaranteed: bool = False):
    """The cheapest correct evaluator for one term (see the module docstring)."""
    args = dict(zip(names, nodes, strict=True))
    constant = {n: graph.nodes[k].value for n, k in args.items() if graph.nodes[k].constant}
    x_value = graph.nodes[variate].value
    key = (distribution.name, tuple(names))
    if key == ("normal", ("location", "scale")):
        if "scale" in constant:
            return NormalFixedScale(variate, args["location"], constant["scale"], graph)
        return NormalVaryingScale(variate, args["location"], args["scale"], graph)
    if key == ("half_normal", ("scale",)) and "scale" in constant and x_value is None:
        return HalfNormalFixedScale(variate, constant["scale"], graph, sign_guaranteed)
    if x_value is not None and not constant:
        # observed data checked at compile time (data checks), so no per-call support test
        if key == ("bernoulli", ("log_odds",)):
            return LogOddsCountsData(x_value, args["log_odds"], graph)
        if key == ("poisson", ("log_rate",)):
            return PoissonLogRateData(x_value, args["log_rate"], graph)
    if (key == ("binomial", ("trials", "log_odds")) and x_value is not None
            and set(constant) == {"trials"}):
        trials = constant["trials"]
        counts_fit = bool(np.all((x_value >= 0) & (x_value <= trials)
                                 & (x_value == np.floor(x_value))
                                 & (trials == np.floor(trials))))
        if counts_fit:  # otherwise the generic term reports the mass as zero (-inf)
            coefficient = float(np.sum(np.broadcast_to(
                gammaln(trials + 1.0) - gammaln(x_value + 1.0) - gammaln(trials - x_value + 1.0),
                np.broadcast_shapes(x_value.shape, trials.shape,
                                    graph.type_of(args["log_odds"]).shape))))
            return LogOddsCountsData(x_value, args["log_odds"], graph, trials, coefficient)
    if (key == ("multivariate_normal", ("location", "covariance_cholesky"))
            and set(constant) <= {"location", "covariance_cholesky"}
            and "covariance_cholesky" in constant
            and MultivariateNormalFixedFactor.applies(
                graph.type_of(variate).shape, graph.type_of(args["location"]).shape,
                constant["covariance_cholesky"])):
        return MultivariateNormalFixedFactor(variate, args["location"],
                                             constant["covariance_cholesky"], graph)
    return GenericTerm(variate, distribution, names, nodes, graph)
