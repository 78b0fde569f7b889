"""How a prior or likelihood term is evaluated inside the plan: generic, fused, or constant.

A generic term calls its distribution's log_density_and_gradients. The most common terms get a fused
kernel instead: a normal (fixed or varying scale), a half-normal with a fixed scale, a Bernoulli on
log-odds or a Poisson on log-rate observing data. Their constant parts (log scales, log factorials,
support checks on data) are settled once at compile time, so a call costs a handful of array
operations; for an 8-group hierarchical model the per-call overhead of the generic route is most of
the time. Terms that depend on no unknown at all are evaluated once and kept as a number.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.special import expit, gammaln, log_expit

from .graph import Graph
from .operations import sum_of_products

LOG_2PI = float(np.log(2.0 * np.pi))
LOG_2 = float(np.log(2.0))


def _accumulate(adjoint: list[Any], node: int, g: Any) -> None:
    previous = adjoint[node]
    adjoint[node] = g if previous is None else previous + g


def _compact(a: np.ndarray) -> Any:
    """A 0-d array as a numpy scalar (much cheaper arithmetic); other arrays unchanged."""
    a = np.asarray(a, dtype=float)
    return a[()] if a.ndim == 0 else a


def _scalar_square(z: Any) -> float:
    return float(z * z)


def _array_square(z: np.ndarray) -> float:
    return sum_of_products(z, z)


def _square_sum_for(batch: tuple[int, ...]):
    """sum(z^2) for values of one known shape, picked once: a scalar or an array."""
    return _scalar_square if not batch else _array_square


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
        self.wrt = frozenset([n for n, _ in self.wanted]
                             + ([] if graph.nodes[variate].constant else ["x"]))
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
    """normal(x; location, scale), constant scale: c - sum(z^2)/2 with z = (x - location)/scale."""

    __slots__ = ("x", "location", "inverse_scale", "inverse_variance", "constant",
                 "x_needed", "location_needed", "location_reduce", "x_reduce", "square_sum")

    def __init__(self, x: int, location: int, scale: np.ndarray, graph: Graph):
        batch = np.broadcast_shapes(graph.type_of(x).shape, graph.type_of(location).shape,
                                    scale.shape)
        self.x, self.location = x, location
        self.inverse_scale = _compact(1.0 / scale)
        self.inverse_variance = _compact(1.0 / (scale * scale))
        self.constant = float(-np.sum(np.broadcast_to(np.log(scale), batch))
                              - 0.5 * LOG_2PI * int(np.prod(batch, dtype=np.int64)))
        self.x_needed = not graph.nodes[x].constant
        self.location_needed = not graph.nodes[location].constant
        self.x_reduce = _reducer(graph.type_of(x).shape, batch)
        self.location_reduce = _reducer(graph.type_of(location).shape, batch)
        self.square_sum = _square_sum_for(batch)

    def value(self, v: list[Any]) -> float:
        z = (v[self.x] - v[self.location]) * self.inverse_scale
        return self.constant - 0.5 * self.square_sum(z)

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        d = v[self.x] - v[self.location]
        z = d * self.inverse_scale
        total = self.constant - 0.5 * self.square_sum(z)
        g = d * self.inverse_variance  # d total / d location; its negative for x
        if self.location_needed:
            _accumulate(adjoint, self.location,
                        g if self.location_reduce is None else self.location_reduce(g))
        if self.x_needed:
            gx = -g
            _accumulate(adjoint, self.x, gx if self.x_reduce is None else self.x_reduce(gx))
        return total


class NormalVaryingScale:
    """normal(x; location, scale) whose scale depends on unknowns (a hierarchical prior).

    -inf when any scale is not positive; the gradients are the analytic ones: d/dx = -z/s,
    d/dlocation = z/s, d/dscale = (z^2 - 1)/s with z = (x - location)/s.
    """

    __slots__ = ("x", "location", "scale", "count", "needed", "reducers", "batch")

    def __init__(self, x: int, location: int, scale: int, graph: Graph):
        shapes = [graph.type_of(n).shape for n in (x, location, scale)]
        self.batch = np.broadcast_shapes(*shapes)
        self.x, self.location, self.scale = x, location, scale
        self.count = int(np.prod(self.batch, dtype=np.int64))
        self.needed = tuple(not graph.nodes[n].constant for n in (x, location, scale))
        self.reducers = tuple(_reducer(shape, self.batch) for shape in shapes)

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

    def value(self, v: list[Any]) -> float:
        parts = self._parts(v)
        return -np.inf if parts is None else parts[2]

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
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

    __slots__ = ("x", "inverse_variance", "constant", "check_sign", "x_reduce")

    def __init__(self, x: int, scale: np.ndarray, graph: Graph, sign_guaranteed: bool):
        shape = graph.type_of(x).shape
        batch = np.broadcast_shapes(shape, scale.shape)
        self.x = x
        self.inverse_variance = _compact(1.0 / (scale * scale))
        self.constant = float(np.sum(np.broadcast_to(LOG_2 - np.log(scale) - 0.5 * LOG_2PI,
                                                     batch)))
        self.check_sign = not sign_guaranteed
        self.x_reduce = _reducer(shape, batch)

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
        total = self.constant - 0.5 * (float(g * x) if np.ndim(g) == 0 else float(np.sum(g * x)))
        gx = -g
        _accumulate(adjoint, self.x, gx if self.x_reduce is None else self.x_reduce(gx))
        return total


class BernoulliLogOddsData:
    """bernoulli(y; log_odds) for fixed 0/1 data y: y . eta - sum(softplus(eta))."""

    __slots__ = ("y", "eta", "eta_reduce")

    def __init__(self, y: np.ndarray, eta: int, graph: Graph):
        batch = np.broadcast_shapes(y.shape, graph.type_of(eta).shape)
        self.y = np.array(np.broadcast_to(y, batch), dtype=float)
        self.eta = eta
        self.eta_reduce = _reducer(graph.type_of(eta).shape, batch)

    def _eta(self, v: list[Any]) -> np.ndarray:
        eta = v[self.eta]
        return eta if self.eta_reduce is None else np.broadcast_to(eta, self.y.shape)

    def value(self, v: list[Any]) -> float:
        eta = self._eta(v)
        return sum_of_products(self.y, eta) + float(np.sum(log_expit(-eta)))

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        eta = self._eta(v)
        total = sum_of_products(self.y, eta) + float(np.sum(log_expit(-eta)))
        g = self.y - expit(eta)
        _accumulate(adjoint, self.eta, g if self.eta_reduce is None else self.eta_reduce(g))
        return total


class PoissonLogRateData:
    """poisson(y; log_rate) for fixed counts y: y . r - sum(exp(r)) - sum(log y!)."""

    __slots__ = ("y", "log_rate", "constant", "reduce")

    def __init__(self, y: np.ndarray, log_rate: int, graph: Graph):
        batch = np.broadcast_shapes(y.shape, graph.type_of(log_rate).shape)
        self.y = np.array(np.broadcast_to(y, batch), dtype=float)
        self.log_rate = log_rate
        self.constant = -float(np.sum(gammaln(self.y + 1.0)))
        self.reduce = _reducer(graph.type_of(log_rate).shape, batch)

    def _log_rate(self, v: list[Any]) -> np.ndarray:
        r = v[self.log_rate]
        return r if self.reduce is None else np.broadcast_to(r, self.y.shape)

    def value(self, v: list[Any]) -> float:
        r = self._log_rate(v)
        return self.constant + sum_of_products(self.y, r) - float(np.sum(np.exp(r)))

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        r = self._log_rate(v)
        rate = np.exp(r)
        total = self.constant + sum_of_products(self.y, r) - float(np.sum(rate))
        g = self.y - rate
        _accumulate(adjoint, self.log_rate, g if self.reduce is None else self.reduce(g))
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
            return BernoulliLogOddsData(x_value, args["log_odds"], graph)
        if key == ("poisson", ("log_rate",)):
            return PoissonLogRateData(x_value, args["log_rate"], graph)
    return GenericTerm(variate, distribution, names, nodes, graph)
