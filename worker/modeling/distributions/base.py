"""The Distribution interface, support checks, and undoing broadcasting in gradients."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

Array = np.ndarray
NEG_INF = -np.inf

# Supports an argument (elementwise, or per event for the structured ones) may be declared with.
SUPPORT_PHRASES: dict[str, str] = {
    "real": "a finite real number",
    "positive": "a positive number",
    "nonnegative": "a non-negative number",
    "unit": "a number between 0 and 1",
    "nonnegative_integer": "a non-negative integer",
    "ordered": "a strictly increasing vector",
    "cholesky_factor": "a lower-triangular matrix with a positive diagonal",
    "simplex": "a non-negative vector summing to 1",
}

# Kinds of variate; observed data for a term must lie in the support the kind names.
VARIATE_PHRASES: dict[str, str] = {
    "real": "finite real numbers",
    "positive": "positive numbers",
    "nonnegative": "non-negative numbers",
    "unit": "numbers between 0 and 1",
    "interval": "numbers between the arguments 'lower' and 'upper'",
    "binary": "0 or 1",
    "nonnegative_integer": "non-negative integers (counts)",
    "count_up_to_trials": "integers from 0 to the argument 'trials'",
    "category": "integers from 1 to the number of categories",
    "simplex": "non-negative vectors summing to 1",
    "counts_summing_to_trials": "vectors of non-negative integers summing to the argument 'trials'",
    "correlation_factor": "Cholesky factors of correlation matrices",
    "covariance_factor": "lower-triangular matrices with a positive diagonal (Cholesky factors)",
}

# Tolerance for structural equalities of floating-point variates (sums to one, unit-norm rows).
STRUCTURE_TOLERANCE = 1e-8


def support_holds(support: str, value: Array) -> bool:
    """Whether every element (or event, for structured supports) of a constant lies in support."""
    v = np.asarray(value, dtype=float)
    with np.errstate(all="ignore"):
        finite = bool(np.all(np.isfinite(v)))
        if support == "real":
            return finite
        if support == "positive":
            return finite and bool(np.all(v > 0))
        if support == "nonnegative":
            return finite and bool(np.all(v >= 0))
        if support == "unit":
            return bool(np.all((v >= 0) & (v <= 1)))
        if support == "nonnegative_integer":
            return finite and bool(np.all((v >= 0) & (v == np.floor(v))))
        if support == "ordered":
            return finite and v.ndim >= 1 and bool(np.all(np.diff(v, axis=-1) > 0))
        if support == "simplex":
            return finite and v.ndim >= 1 and bool(np.all(v >= 0)) and bool(np.all(
                np.abs(np.sum(v, axis=-1) - 1.0) <= STRUCTURE_TOLERANCE * v.shape[-1]))
        if support == "cholesky_factor":
            if v.ndim < 2 or v.shape[-1] != v.shape[-2] or not finite:
                return False
            upper = np.triu(v, 1)
            diagonal = np.diagonal(v, axis1=-2, axis2=-1)
            return bool(np.all(upper == 0) and np.all(diagonal > 0))
    raise ValueError(f"unknown support {support!r}")


def sum_to_shape(g: Array, full: tuple[int, ...], target: tuple[int, ...]) -> Array:
    """Sum a pointwise gradient, broadcast to `full`, down to the shape of the array passed in.

    A pointwise gradient may be constant along axes of the batch (d/dlower of a uniform does not
    involve x), so it counts as broadcast to the full batch before summing: each batch element
    contributes.
    """
    g = np.asarray(g)
    if target == full:
        return g if g.shape == full else np.array(np.broadcast_to(g, full))
    if not target:
        # a scalar argument: the sum of g broadcast to `full` is g.sum() times the replication
        total = g.sum()
        return total if g.shape == full else total * (math.prod(full) // max(g.size, 1))
    if g.shape != full:
        g = np.broadcast_to(g, full)
    lead = len(full) - len(target)
    axes = tuple(range(lead)) + tuple(
        lead + i for i, n in enumerate(target) if n == 1 and full[lead + i] != 1
    )
    return np.asarray(g.sum(axis=axes)).reshape(target)


class Summed:
    """A gradient a distribution has already summed over the batch (e.g. by np.bincount), with any
    out-of-support elements already excluded; it is passed through as it is."""

    __slots__ = ("value",)

    def __init__(self, value: Array) -> None:
        self.value = value


class Distribution:
    """One distribution under one parameterisation.

    Subclasses implement `_log_density(x, *args)` and `_log_density_and_pointwise(x, *args, wrt)`.
    The latter returns the pointwise values, the pointwise gradients (broadcastable to the batch
    shape followed by each array's own event shape) and a mask of out-of-support batch elements
    (or None when everything is in support). Arguments arrive in the order of `arguments`.
    """

    name: str = ""
    arguments: tuple[str, ...] = ()
    variate_kind: str = "real"
    event_ndim: int = 0
    argument_support: Mapping[str, str] = {}
    # trailing axes of each argument that belong to one event (a location vector, a cutpoint vector)
    argument_event_ndim: Mapping[str, int] = {}
    discrete: bool = False

    def __repr__(self) -> str:
        return f"<distribution {self.name}({', '.join(self.arguments)})>"

    # errstate as a decorator costs less per call than a with-block; out-of-support points are
    # expected here and become -inf, so their floating-point warnings carry no information
    @np.errstate(all="ignore")
    def log_density(self, x: Array, args: Mapping[str, Array]) -> Array:
        """Pointwise log density (or mass) over the broadcast batch; -inf outside the support."""
        return self._log_density(np.asarray(x), *[np.asarray(args[n]) for n in self.arguments])

    @np.errstate(all="ignore")
    def log_density_and_gradients(
        self, x: Array, args: Mapping[str, Array], wrt: frozenset[str]
    ) -> tuple[Array, dict[str, Array]]:
        """Pointwise values, and gradients of their sum shaped like the arrays passed in."""
        xa = np.asarray(x)
        values = [np.asarray(args[n]) for n in self.arguments]
        val, pointwise, bad = self._log_density_and_pointwise(xa, *values, wrt=wrt)
        batch = val.shape
        grads: dict[str, Array] = {}
        for key, g in pointwise.items():
            if type(g) is Summed:
                grads[key] = g.value
                continue
            if key == "x":
                target = xa.shape
                k = self.event_ndim
            else:
                target = values[self.arguments.index(key)].shape
                k = self.argument_event_ndim.get(key, 0)
            event = target[len(target) - k :] if k else ()
            if bad is not None:
                # out-of-support elements carry no gradient, so a -inf total has a finite gradient
                g = np.where(bad.reshape(bad.shape + (1,) * len(event)), 0.0, g)
            grads[key] = sum_to_shape(g, batch + event, target)
        if bad is not None:
            val = np.where(bad, NEG_INF, val)
        return val, grads

    def variate_valid(self, x: Array, args: Mapping[str, Array]) -> Array:
        """Boolean mask over the batch: which observed values lie in the variate's support."""
        v = np.asarray(x, dtype=float)
        kind = self.variate_kind
        with np.errstate(all="ignore"):
            finite = np.isfinite(v)
            integral = finite & (v == np.floor(v))
            if kind == "real":
                ok = finite
            elif kind == "positive":
                ok = finite & (v > 0)
            elif kind == "nonnegative":
                ok = finite & (v >= 0)
            elif kind == "unit":
                ok = (v >= 0) & (v <= 1)
            elif kind == "interval":
                ok = finite & (v >= args["lower"]) & (v <= args["upper"])
            elif kind == "binary":
                ok = (v == 0) | (v == 1)
            elif kind == "nonnegative_integer":
                ok = integral & (v >= 0)
            elif kind == "count_up_to_trials":
                ok = integral & (v >= 0) & (v <= args["trials"])
            elif kind == "category":
                ok = integral & (v >= 1) & (v <= self.category_count(args))
            elif kind == "simplex":
                ok = np.all(v >= 0, axis=-1) & (
                    np.abs(np.sum(v, axis=-1) - 1.0) <= STRUCTURE_TOLERANCE * v.shape[-1]
                )
            elif kind == "counts_summing_to_trials":
                ok = np.all(integral & (v >= 0), axis=-1) & (np.sum(v, axis=-1) == args["trials"])
            elif kind == "correlation_factor":
                ok = correlation_factor_valid(v)
            elif kind == "covariance_factor":
                ok = covariance_factor_valid(v)
            else:
                raise ValueError(f"unknown variate kind {kind!r}")
        return np.asarray(ok)

    def category_count(self, args: Mapping[str, Array]) -> int:
        """Number of outcomes of a categorical variate (1..count)."""
        raise TypeError(f"{self.name} has no categories")

    def sample(
        self, args: Mapping[str, Array], rng: np.random.Generator, shape: tuple[int, ...] | None
    ) -> Array:
        """Draws of exactly `shape` (batch shape, then the event shape), or the arguments' shape."""
        values = [np.asarray(args[n], dtype=float) for n in self.arguments]
        if shape is None:
            shape = self._default_shape(values)
        with np.errstate(all="ignore"):
            return np.asarray(self._sample(rng, tuple(shape), *values))

    def _default_shape(self, values: list[Array]) -> tuple[int, ...]:
        return np.broadcast_shapes(*[v.shape for v in values])

    # subclass hooks -----------------------------------------------------------------------------
    def _log_density(self, x: Array, *args: Array) -> Array:
        val, _, bad = self._log_density_and_pointwise(x, *args, wrt=frozenset())
        return val if bad is None else np.where(bad, NEG_INF, val)

    def _log_density_and_pointwise(
        self, x: Array, *args: Array, wrt: frozenset[str]
    ) -> tuple[Array, dict[str, Array], Array | None]:
        raise NotImplementedError

    def _sample(self, rng: np.random.Generator, shape: tuple[int, ...], *args: Array) -> Array:
        raise NotImplementedError


def correlation_factor_valid(v: Array) -> Array:
    """Per matrix: square, lower triangular, positive diagonal, rows of unit length."""
    if v.ndim < 2 or v.shape[-1] != v.shape[-2]:
        return np.zeros(v.shape[:-2] if v.ndim >= 2 else (), dtype=bool)
    upper_zero = np.all(np.triu(v, 1) == 0, axis=(-2, -1))
    diagonal = np.all(np.diagonal(v, axis1=-2, axis2=-1) > 0, axis=-1)
    unit_rows = np.all(
        np.abs(np.sum(v * v, axis=-1) - 1.0) <= STRUCTURE_TOLERANCE * v.shape[-1], axis=-1
    )
    return upper_zero & diagonal & unit_rows


def covariance_factor_valid(v: Array) -> Array:
    """Per matrix: square, finite, lower triangular, positive diagonal."""
    if v.ndim < 2 or v.shape[-1] != v.shape[-2]:
        return np.zeros(v.shape[:-2] if v.ndim >= 2 else (), dtype=bool)
    finite = np.all(np.isfinite(v), axis=(-2, -1))
    upper_zero = np.all(np.triu(v, 1) == 0, axis=(-2, -1))
    diagonal = np.all(np.diagonal(v, axis1=-2, axis2=-1) > 0, axis=-1)
    return finite & upper_zero & diagonal


def positive(*arrays: Array) -> bool:
    """Every element > 0 (NaN fails): one reduction per array instead of a mask and a reduction."""
    for a in arrays:
        if a.ndim == 0:
            if not a > 0:
                return False
        elif a.size and not a.min() > 0:
            return False
    return True


def nonnegative(*arrays: Array) -> bool:
    """Every element >= 0 (NaN fails)."""
    for a in arrays:
        if a.ndim == 0:
            if not a >= 0:
                return False
        elif a.size and not a.min() >= 0:
            return False
    return True


def counts(x: Array) -> bool:
    """Every element a non-negative integer; integer arrays skip the integrality test."""
    if x.dtype.kind in "iub":
        return nonnegative(x)
    return nonnegative(x) and bool(np.all(x == np.floor(x)))


def binary(x: Array) -> bool:
    """Every element 0 or 1."""
    if x.ndim == 0:
        return bool(x == 0 or x == 1)
    if x.dtype.kind in "iub":
        return x.size == 0 or bool(x.min() >= 0 and x.max() <= 1)
    return bool(np.all((x == 0) | (x == 1)))


def mask_or_none(bad: Array) -> Array | None:
    """Keep an out-of-support mask only when something is out of support (saves a pass)."""
    return bad if bad.any() else None
