"""Maps from unconstrained vectors to each kind of unknown, with log-Jacobians and their gradients.

Each transform is bound to the unknown's declared shape. `constrain` takes the unknown's 1-D slice
of the unconstrained vector; `log_jacobian_and_gradient` is log |det J| of the map from that slice
to the unknown's free coordinates (all of them, or the first K-1 of a simplex, or the strictly lower
entries of a Cholesky factor); `constrain_vjp` pulls a gradient with respect to the constrained
value back to the slice. `forward` does all three in one pass for the compiled model's hot path.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from .special import expit, log_expit, softplus

Array = np.ndarray
Backward = Callable[[Array], Array]


class Transform:
    """Base class: the identity on an unbounded unknown of any shape."""

    structure = "unbounded"

    def __init__(self, shape: tuple[int, ...] = ()) -> None:
        self.shape = tuple(int(n) for n in shape)
        self.dimension = self.size(self.shape)

    def __repr__(self) -> str:
        return f"<transform {self.structure} {list(self.shape)}>"

    def size(self, shape: tuple[int, ...]) -> int:
        """Unconstrained length for a declared shape."""
        return int(np.prod(shape, dtype=np.int64))

    def constrain(self, u_slice: Array) -> Array:
        return np.asarray(u_slice, dtype=float).reshape(self.shape)

    def unconstrain(self, x: Array) -> Array:
        return np.asarray(x, dtype=float).reshape(-1).copy()

    def log_jacobian_and_gradient(self, u_slice: Array) -> tuple[float, Array]:
        return 0.0, np.zeros(self.dimension)

    def constrain_vjp(self, u_slice: Array, upstream: Array) -> Array:
        """d(upstream . constrain(u)) / du."""
        return np.asarray(upstream, dtype=float).reshape(-1)

    def forward(self, u_slice: Array) -> tuple[Array, float, Backward]:
        """Constrained value, log-Jacobian, and a function taking the gradient with respect to the
        constrained value to the gradient of (that value's contribution + log-Jacobian) w.r.t. u."""
        return self.constrain(u_slice), 0.0, self._identity_backward

    def _identity_backward(self, upstream: Array) -> Array:
        return np.asarray(upstream, dtype=float).reshape(-1)


class Unbounded(Transform):
    structure = "unbounded"


class LowerBound(Transform):
    """x = lower + exp(u)."""

    structure = "lower"

    def __init__(self, shape: tuple[int, ...], lower: Array) -> None:
        super().__init__(shape)
        self.lower = np.asarray(lower, dtype=float)

    def constrain(self, u_slice):
        return self.lower + np.exp(u_slice).reshape(self.shape)

    def unconstrain(self, x):
        with np.errstate(all="ignore"):
            return np.log(np.asarray(x, dtype=float) - self.lower).reshape(-1) + 0.0

    def log_jacobian_and_gradient(self, u_slice):
        return float(np.sum(u_slice)), np.ones(self.dimension)

    def constrain_vjp(self, u_slice, upstream):
        return np.exp(u_slice) * np.reshape(upstream, -1)

    def forward(self, u_slice):
        e = np.exp(u_slice)
        x = self.lower + e.reshape(self.shape)

        def backward(upstream: Array) -> Array:
            return e * np.reshape(upstream, -1) + 1.0

        return x, float(np.sum(u_slice)), backward


class UpperBound(Transform):
    """x = upper - exp(u)."""

    structure = "upper"

    def __init__(self, shape: tuple[int, ...], upper: Array) -> None:
        super().__init__(shape)
        self.upper = np.asarray(upper, dtype=float)

    def constrain(self, u_slice):
        return self.upper - np.exp(u_slice).reshape(self.shape)

    def unconstrain(self, x):
        with np.errstate(all="ignore"):
            return np.log(self.upper - np.asarray(x, dtype=float)).reshape(-1) + 0.0

    def log_jacobian_and_gradient(self, u_slice):
        return float(np.sum(u_slice)), np.ones(self.dimension)

    def constrain_vjp(self, u_slice, upstream):
        return -np.exp(u_slice) * np.reshape(upstream, -1)

    def forward(self, u_slice):
        e = np.exp(u_slice)
        x = self.upper - e.reshape(self.shape)

        def backward(upstream: Array) -> Array:
            return 1.0 - e * np.reshape(upstream, -1)

        return x, float(np.sum(u_slice)), backward


class Interval(Transform):
    """x = lower + (upper - lower) * logistic(u)."""

    structure = "interval"

    def __init__(self, shape: tuple[int, ...], lower: Array, upper: Array) -> None:
        super().__init__(shape)
        self.lower = np.asarray(lower, dtype=float)
        self.upper = np.asarray(upper, dtype=float)
        self.width = self.upper - self.lower
        # log(width) summed over the elements: the constant part of the log-Jacobian
        self._log_width_total = float(np.sum(np.broadcast_to(np.log(self.width), self.shape)))
        self._width_flat = np.broadcast_to(self.width, self.shape).reshape(-1)

    def constrain(self, u_slice):
        return self.lower + self.width * expit(u_slice).reshape(self.shape)

    def unconstrain(self, x):
        with np.errstate(all="ignore"):
            t = (np.asarray(x, dtype=float) - self.lower) / self.width
            return (np.log(t) - np.log1p(-t)).reshape(-1) + 0.0

    def log_jacobian_and_gradient(self, u_slice):
        value = self._log_width_total + float(np.sum(log_expit(u_slice) + log_expit(-u_slice)))
        return value, 1.0 - 2.0 * expit(u_slice)

    def constrain_vjp(self, u_slice, upstream):
        s = expit(u_slice)
        return self._width_flat * s * (1.0 - s) * np.reshape(upstream, -1)

    def forward(self, u_slice):
        s = expit(u_slice)
        x = self.lower + self.width * s.reshape(self.shape)
        log_jac = self._log_width_total - float(np.sum(softplus(u_slice) + softplus(-u_slice)))
        ds = self._width_flat * s * (1.0 - s)

        def backward(upstream: Array) -> Array:
            return ds * np.reshape(upstream, -1) + (1.0 - 2.0 * s)

        return x, log_jac, backward


def make_transform(
    shape: tuple[int, ...] | list[int],
    lower: float | Array | None = None,
    upper: float | Array | None = None,
    structure: str | None = None,
) -> Transform:
    """The transform for an unknown declared with this shape and bounds or structure."""
    shape = tuple(int(n) for n in shape)
    if structure is not None and structure != "unbounded":
        cls = STRUCTURES.get(structure)
        if cls is None:
            known = ", ".join(sorted(STRUCTURES))
            raise ValueError(f"unknown structure {structure!r}; expected one of {known}")
        return cls(shape)
    has_lower = lower is not None and bool(np.all(np.isfinite(lower)))
    has_upper = upper is not None and bool(np.all(np.isfinite(upper)))
    if has_lower and has_upper:
        return Interval(shape, lower, upper)
    if has_lower:
        return LowerBound(shape, lower)
    if has_upper:
        return UpperBound(shape, upper)
    return Unbounded(shape)


STRUCTURES: dict[str, type[Transform]] = {}
