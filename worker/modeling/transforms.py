"""Maps from unconstrained vectors to each kind of unknown, with log-Jacobians and their gradients.

Each transform is bound to the unknown's declared shape. `constrain` takes the unknown's 1-D slice
of the unconstrained vector; `log_jacobian_and_gradient` is log |det J| of the map from that slice
to the unknown's free coordinates (all of them, or the first K-1 of a simplex, or the strictly lower
entries of a correlation matrix's Cholesky factor, or the lower triangle with the diagonal of a
covariance matrix's); `constrain_vjp` pulls a gradient with respect to the constrained
value back to the slice. `forward` does all three in one pass for the compiled model's hot path.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from .special import expit, log_expit

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
        # softplus(u) + softplus(-u) = |u| + 2 log1p(exp(-|u|)): one exponential, no overflow
        au = np.abs(u_slice)
        log_jac = self._log_width_total - float(np.sum(au + 2.0 * np.log1p(np.exp(-au))))
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
        if structure == "ordered" and lower is not None:
            return LowerOrdered(shape, float(lower))
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


def _reverse_cumsum(v: Array) -> Array:
    """Sums from each position to the end of the last axis."""
    return np.cumsum(v[..., ::-1], axis=-1)[..., ::-1]


class Simplex(Transform):
    """Stick-breaking: K-1 free values; piece k takes the share logistic(u_k - log(K - k)) of what
    is left, so u = 0 maps to the uniform simplex point. Applies along the last axis."""

    structure = "simplex"

    def __init__(self, shape: tuple[int, ...]) -> None:
        if len(shape) < 1 or shape[-1] < 1:
            raise ValueError("a simplex needs a shape whose last axis has at least one element")
        super().__init__(shape)
        k = self.shape[-1]
        self._free_shape = self.shape[:-1] + (k - 1,)
        self._offset = np.log(np.arange(k - 1, 0, -1, dtype=float))
        # weight of each free value in the log-Jacobian's gradient: 1 + the pieces after it
        self._after = np.arange(k - 2, -1, -1, dtype=float)

    def size(self, shape):
        return int(np.prod(shape[:-1], dtype=np.int64)) * (int(shape[-1]) - 1)

    def _pieces(self, u_slice):
        a = np.reshape(u_slice, self._free_shape) - self._offset
        log_share = log_expit(a)
        log_rest = log_expit(-a)
        # log of the stick left before piece k: sum of log(1 - share) over earlier pieces
        log_left = np.concatenate(
            [np.zeros(self.shape[:-1] + (1,)), np.cumsum(log_rest, axis=-1)], axis=-1
        )
        x = np.exp(log_left)
        x[..., :-1] *= np.exp(log_share)
        return a, log_share, log_rest, log_left, x

    def constrain(self, u_slice):
        return self._pieces(u_slice)[4]

    def unconstrain(self, x):
        x = np.asarray(x, dtype=float).reshape(self.shape)
        with np.errstate(all="ignore"):
            left = _reverse_cumsum(x)[..., :-1]      # the stick left before each piece
            share = x[..., :-1] / left
            u = np.log(share) - np.log1p(-share) + self._offset
        return u.reshape(-1)

    def _log_jacobian(self, log_share, log_rest, log_left):
        return float(np.sum(log_share + log_rest + log_left[..., :-1]))

    def log_jacobian_and_gradient(self, u_slice):
        a, log_share, log_rest, log_left, _ = self._pieces(u_slice)
        share = np.exp(log_share)
        grad = 1.0 - 2.0 * share - share * self._after
        return self._log_jacobian(log_share, log_rest, log_left), grad.reshape(-1)

    def constrain_vjp(self, u_slice, upstream):
        a, log_share, _, _, x = self._pieces(u_slice)
        return self._vjp(np.exp(log_share), x, upstream)

    def _vjp(self, share, x, upstream):
        g = np.reshape(upstream, self.shape) * x
        later = _reverse_cumsum(g)[..., 1:]               # sum of g over pieces after k
        return (g[..., :-1] * (1.0 - share) - share * later).reshape(-1)

    def forward(self, u_slice):
        a, log_share, log_rest, log_left, x = self._pieces(u_slice)
        share = np.exp(log_share)
        log_jac = self._log_jacobian(log_share, log_rest, log_left)
        jac_grad = (1.0 - 2.0 * share - share * self._after).reshape(-1)

        def backward(upstream: Array) -> Array:
            return self._vjp(share, x, upstream) + jac_grad

        return x, log_jac, backward


class Ordered(Transform):
    """x_1 = u_1, x_k = x_{k-1} + exp(u_k): strictly increasing along the last axis."""

    structure = "ordered"

    def __init__(self, shape: tuple[int, ...]) -> None:
        if len(shape) < 1:
            raise ValueError("an ordered vector needs at least one axis")
        super().__init__(shape)
        self._jac_grad = np.ones(self.shape)
        self._jac_grad[..., 0] = 0.0
        self._jac_grad = self._jac_grad.reshape(-1)

    def _steps(self, u):
        steps = np.exp(u)
        steps[..., 0] = u[..., 0]
        return steps

    def constrain(self, u_slice):
        return np.cumsum(self._steps(np.reshape(u_slice, self.shape)), axis=-1)

    def unconstrain(self, x):
        x = np.asarray(x, dtype=float).reshape(self.shape)
        with np.errstate(all="ignore"):
            u = np.concatenate([x[..., :1], np.log(np.diff(x, axis=-1))], axis=-1)
        return u.reshape(-1)

    def log_jacobian_and_gradient(self, u_slice):
        u = np.reshape(u_slice, self.shape)
        return float(np.sum(u[..., 1:])), self._jac_grad

    def _vjp(self, steps, upstream):
        later = _reverse_cumsum(np.reshape(upstream, self.shape))
        d = later * steps
        d[..., 0] = later[..., 0]
        return d.reshape(-1)

    def constrain_vjp(self, u_slice, upstream):
        return self._vjp(self._steps(np.reshape(u_slice, self.shape)), upstream)

    def forward(self, u_slice):
        u = np.reshape(u_slice, self.shape)
        steps = self._steps(u)
        x = np.cumsum(steps, axis=-1)

        def backward(upstream: Array) -> Array:
            return self._vjp(steps, upstream) + self._jac_grad

        return x, float(np.sum(u[..., 1:])), backward


class LowerOrdered(Transform):
    """x_k = lower + exp(u_1) + ... + exp(u_k): above `lower` and strictly increasing along the
    last axis (`ordered` with a `lower` bound; lower 0 gives a positive increasing vector)."""

    structure = "ordered"

    def __init__(self, shape: tuple[int, ...], lower: float) -> None:
        if len(shape) < 1:
            raise ValueError("an ordered vector with a lower bound needs at least one axis")
        super().__init__(shape)
        self.lower = float(lower)

    def constrain(self, u_slice):
        return self.lower + np.cumsum(np.exp(np.reshape(u_slice, self.shape)), axis=-1)

    def unconstrain(self, x):
        x = np.asarray(x, dtype=float).reshape(self.shape)
        with np.errstate(all="ignore"):
            u = np.log(np.diff(x, axis=-1, prepend=self.lower))
        return u.reshape(-1)

    def log_jacobian_and_gradient(self, u_slice):
        return float(np.sum(u_slice)), np.ones(self.dimension)

    def constrain_vjp(self, u_slice, upstream):
        steps = np.exp(np.reshape(u_slice, self.shape))
        return (_reverse_cumsum(np.reshape(upstream, self.shape)) * steps).reshape(-1)

    def forward(self, u_slice):
        steps = np.exp(np.reshape(u_slice, self.shape))
        x = self.lower + np.cumsum(steps, axis=-1)

        def backward(upstream: Array) -> Array:
            return (_reverse_cumsum(np.reshape(upstream, self.shape)) * steps).reshape(-1) + 1.0

        return x, float(np.sum(u_slice)), backward


def cholesky_from_partial_correlations(z: Array) -> tuple[Array, Array]:
    """Cholesky factor of a correlation matrix from canonical partial correlations.

    z (..., K, K) holds the partial correlations in its strictly lower triangle (other entries are
    ignored). Row i: L_ij = z_ij * sqrt(1 - sum_{k<j} L_ik^2) and L_ii = sqrt(1 - sum_{k<i} L_ik^2)
    (Lewandowski, Kurowicka & Joe 2009, section 2). Returns L and W, the remaining row lengths
    W_ij = prod_{k<j} sqrt(1 - z_ik^2), with L = (z + I) * W on and below the diagonal.
    """
    k = z.shape[-1]
    lower = np.tril(z, -1)
    log_rest = np.log1p(-lower * lower)            # zero outside the strict lower triangle
    log_w = 0.5 * (np.cumsum(log_rest, axis=-1) - log_rest)
    w = np.exp(log_w)
    # lower + I is zero above the diagonal, so the product is already lower triangular
    return (lower + np.eye(k)) * w, w


class CorrelationFactor(Transform):
    """Cholesky factor of a K x K correlation matrix from K(K-1)/2 free values: tanh gives the
    canonical partial correlations (row by row, strictly lower triangle), which build the factor."""

    structure = "correlation_factor"

    def __init__(self, shape: tuple[int, ...]) -> None:
        if len(shape) != 2 or shape[0] != shape[1] or shape[0] < 1:
            raise ValueError("a Cholesky factor of a correlation matrix needs a shape [K, K]")
        super().__init__(shape)
        k = self.shape[0]
        self._rows, self._cols = np.tril_indices(k, -1)
        # log|J| = sum over free entries of -(i - j + 1) log cosh(u_ij)  (0-based row i, column j);
        # from log(1 - z^2) = -2 log cosh u and the remaining-length factors of later entries
        self._weight = (self._rows - self._cols + 1).astype(float)

    def size(self, shape):
        k = int(shape[0])
        return k * (k - 1) // 2

    def _partial(self, u_slice):
        z = np.zeros(self.shape)
        z[self._rows, self._cols] = np.tanh(u_slice)
        return z

    def constrain(self, u_slice):
        return cholesky_from_partial_correlations(self._partial(u_slice))[0]

    def unconstrain(self, x):
        x = np.asarray(x, dtype=float).reshape(self.shape)
        with np.errstate(all="ignore"):
            # the squared length left before column j equals the sum of squares from j onwards
            left = np.sqrt(_reverse_cumsum(x * x))
            z = x / left
            return np.arctanh(z[self._rows, self._cols])

    def _log_jacobian(self, u):
        au = np.abs(u)
        log_cosh = au + np.log1p(np.exp(-2.0 * au)) - np.log(2.0)
        return -float(np.dot(self._weight, log_cosh))

    def log_jacobian_and_gradient(self, u_slice):
        u = np.asarray(u_slice, dtype=float)
        return self._log_jacobian(u), -self._weight * np.tanh(u)

    def _vjp(self, z, chol, w, upstream):
        y = np.reshape(upstream, self.shape)
        g = y * chol            # zero above the diagonal, where the factor is constant
        # L_ij depends on log(1 - z_ik^2) for k < j <= i through W_ij = exp(half the sum)
        d_log_rest = 0.5 * (_reverse_cumsum(g) - g)
        zf = z[self._rows, self._cols]
        direct = (y * w)[self._rows, self._cols] * (1.0 - zf * zf)
        return direct - 2.0 * zf * d_log_rest[self._rows, self._cols]

    def constrain_vjp(self, u_slice, upstream):
        z = self._partial(u_slice)
        chol, w = cholesky_from_partial_correlations(z)
        return self._vjp(z, chol, w, upstream)

    def forward(self, u_slice):
        u = np.asarray(u_slice, dtype=float)
        z = self._partial(u)
        chol, w = cholesky_from_partial_correlations(z)
        log_jac = self._log_jacobian(u)
        jac_grad = -self._weight * z[self._rows, self._cols]

        def backward(upstream: Array) -> Array:
            return self._vjp(z, chol, w, upstream) + jac_grad

        return chol, log_jac, backward


class CovarianceFactor(Transform):
    """A K x K lower-triangular matrix with a positive diagonal (the Cholesky factor of a
    covariance matrix) from K(K+1)/2 free values, row by row: entries below the diagonal are the
    values themselves and diagonal entries their exponentials. log|J| is the sum of the values
    that become diagonal entries."""

    structure = "covariance_factor"

    def __init__(self, shape: tuple[int, ...]) -> None:
        if len(shape) != 2 or shape[0] != shape[1] or shape[0] < 1:
            raise ValueError("a Cholesky factor of a covariance matrix needs a shape [K, K]")
        super().__init__(shape)
        self._rows, self._cols = np.tril_indices(self.shape[0])
        self._on_diagonal = self._rows == self._cols
        self._jac_grad = self._on_diagonal.astype(float)

    def size(self, shape):
        k = int(shape[0])
        return k * (k + 1) // 2

    def _entries(self, u):
        return np.where(self._on_diagonal, np.exp(u), u)

    def constrain(self, u_slice):
        x = np.zeros(self.shape)
        x[self._rows, self._cols] = self._entries(np.asarray(u_slice, dtype=float))
        return x

    def unconstrain(self, x):
        x = np.asarray(x, dtype=float).reshape(self.shape)
        entries = x[self._rows, self._cols]
        with np.errstate(all="ignore"):
            return np.where(self._on_diagonal, np.log(entries), entries)

    def log_jacobian_and_gradient(self, u_slice):
        u = np.asarray(u_slice, dtype=float)
        return float(np.sum(u[self._on_diagonal])), self._jac_grad

    def _vjp(self, entries, upstream):
        y = np.reshape(upstream, self.shape)[self._rows, self._cols]
        # d exp(u)/du = exp(u) on the diagonal, 1 below it
        return np.where(self._on_diagonal, y * entries, y)

    def constrain_vjp(self, u_slice, upstream):
        return self._vjp(self._entries(np.asarray(u_slice, dtype=float)), upstream)

    def forward(self, u_slice):
        u = np.asarray(u_slice, dtype=float)
        entries = self._entries(u)
        x = np.zeros(self.shape)
        x[self._rows, self._cols] = entries

        def backward(upstream: Array) -> Array:
            return self._vjp(entries, upstream) + self._jac_grad

        return x, float(np.sum(u[self._on_diagonal])), backward


STRUCTURES.update(
    {
        "simplex": Simplex,
        "ordered": Ordered,
        "correlation_factor": CorrelationFactor,
        "covariance_factor": CovarianceFactor,
    }
)
