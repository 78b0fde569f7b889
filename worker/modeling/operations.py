"""The operations of the expression language: a forward function and a vector-Jacobian product each.

``forward(*inputs)`` returns the value; ``backward(g, inputs, out, needs)`` returns, for each input,
the gradient of ``sum(g * out)`` with respect to that input, with exactly the input's shape, or None
where ``needs`` says nobody wants it (a data matrix in X @ beta must never get an n-by-p gradient).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import special

Array = np.ndarray
Grads = list[Array | None]


# Above this length a dot product is done by einsum rather than BLAS: a BLAS dot of a long vector
# may wake BLAS worker threads, which on a busy machine (one chain per core) costs far more than
# the arithmetic; below it BLAS's lower call overhead wins.
_BLAS_DOT_LIMIT = 1024


def sum_of_products(a: Array, b: Array) -> float:
    """sum(a * b) over equal shapes, in one pass."""
    if a.size <= _BLAS_DOT_LIMIT:
        # the method call is a third of np.vdot's cost on the short vectors of small models
        return float(a.dot(b)) if a.ndim == 1 else float(a.ravel().dot(b.ravel()))
    return float(np.einsum("i,i->", a.reshape(-1), b.reshape(-1)))


_sum = np.add.reduce  # the ufunc's own reduction: no Python wrapper as in ndarray.sum


def _reduce_to(grad: Array, shape: tuple[int, ...]) -> Array:
    """Undo scalar broadcasting: the only broadcasting the language allows."""
    if grad.shape == shape:
        return grad
    return _sum(grad, None)


class Operation:
    __slots__ = ()
    name = "operation"

    def forward(self, *inputs: Array) -> Array:
        raise NotImplementedError

    def backward(self, g: Array, inputs: Sequence[Array], out: Array,
                 needs: Sequence[bool]) -> Grads:
        raise NotImplementedError


class Add(Operation):
    __slots__ = ()
    name = "+"

    def forward(self, a, b):
        return a + b

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        return [_reduce_to(g, a.shape) if needs[0] else None,
                _reduce_to(g, b.shape) if needs[1] else None]


class Subtract(Operation):
    __slots__ = ()
    name = "-"

    def forward(self, a, b):
        return a - b

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        return [_reduce_to(g, a.shape) if needs[0] else None,
                _reduce_to(-g, b.shape) if needs[1] else None]


class Multiply(Operation):
    __slots__ = ()
    name = "*"

    def forward(self, a, b):
        return a * b

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        return [_product_gradient(g, b, a.shape) if needs[0] else None,
                _product_gradient(g, a, b.shape) if needs[1] else None]


def _product_gradient(g: Array, other: Array, shape: tuple[int, ...]) -> Array:
    """Reduced g * other: for a scalar times a vector, one dot product instead of two passes."""
    if shape == g.shape:
        return g * other
    if other.shape == g.shape:
        return np.float64(sum_of_products(g, other))
    return (g * other).sum()


class ProductCombined(Operation):
    """a + p, p + a, a - p or p - a with p = b * c or b @ c, as one step (inputs a, b, c), fused
    at plan time.

    Each call does the same floating-point operations as the addition (or subtraction) and the
    product it replaces, forward and backward, so values and gradients keep their bits; only the
    order in which several gradient contributions to one node are added up may change. When the
    product has the result's shape, the sum is written over the product's fresh array: one array
    and one pass fewer (a linear predictor ``intercept + X @ beta`` over 50,000 rows).
    """

    __slots__ = ("subtract", "product_first", "product_shape", "product", "in_place", "name")

    def __init__(self, subtract: bool, product_first: bool, product_shape: tuple[int, ...],
                 product: Operation, result_shape: tuple[int, ...]):
        self.subtract = subtract
        self.product_first = product_first
        self.product_shape = product_shape
        self.product = product
        self.in_place = bool(product_shape) and product_shape == result_shape
        symbol = product.name
        self.name = (f"(b {symbol} c) - a" if product_first else f"a - (b {symbol} c)") \
            if subtract else f"a + (b {symbol} c)"

    def forward(self, a, b, c):
        p = self.product.forward(b, c)
        if self.in_place and p.dtype == np.float64:  # (a product of two booleans stays boolean)
            if not self.subtract:
                return np.add(p, a, out=p)  # IEEE addition is commutative: the bits of a + p
            return np.subtract(p, a, out=p) if self.product_first else np.subtract(a, p, out=p)
        if not self.subtract:
            return a + p
        return p - a if self.product_first else a - p

    def backward(self, g, inputs, out, needs):
        a, b, c = inputs
        ga = gb = gc = None
        if needs[0]:
            ga = _reduce_to(-g if self.subtract and self.product_first else g, a.shape)
        if needs[1] or needs[2]:
            gp = _reduce_to(-g if self.subtract and not self.product_first else g,
                            self.product_shape)
            gb, gc = self.product.backward(gp, [b, c], None, (needs[1], needs[2]))
        return [ga, gb, gc]


class Divide(Operation):
    __slots__ = ()
    name = "/"

    def forward(self, a, b):
        return a / b

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        ga = g / b
        return [_reduce_to(ga, a.shape) if needs[0] else None,
                _reduce_to(-ga * out, b.shape) if needs[1] else None]


class Power(Operation):
    __slots__ = ()
    name = "^"

    def forward(self, a, b):
        return np.power(a, b)

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        ga = gb = None
        if needs[0]:
            ga = _reduce_to(g * b * np.power(a, b - 1.0), a.shape)
        if needs[1]:
            # d(a^b)/db = a^b log a; where a^b is 0 the product is 0 (limit as a -> 0+).
            log_a = np.log(np.where(out == 0.0, 1.0, a))
            gb = _reduce_to(g * out * log_a, b.shape)
        return [ga, gb]


class Negate(Operation):
    __slots__ = ()
    name = "negate"

    def forward(self, a):
        return -a

    def backward(self, g, inputs, out, needs):
        return [-g]


class MatrixProduct(Operation):
    __slots__ = ()
    name = "@"

    def forward(self, a, b):
        return a @ b

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        ga = gb = None
        if needs[0]:
            ga = np.outer(g, b) if b.ndim == 1 else g @ b.T
        if needs[1]:
            gb = a.T @ g
        return [ga, gb]


class Elementwise(Operation):
    """A function applied to every element; ``derivative(x, out)`` is the elementwise slope."""

    __slots__ = ("name", "function", "derivative")

    def __init__(self, name, function, derivative):
        self.name = name
        self.function = function
        self.derivative = derivative

    def forward(self, a):
        return self.function(a)

    def backward(self, g, inputs, out, needs):
        return [g * self.derivative(inputs[0], out)]


ELEMENTWISE: dict[str, Elementwise] = {
    op.name: op
    for op in (
        Elementwise("exp", np.exp, lambda x, y: y),
        Elementwise("log", np.log, lambda x, y: 1.0 / x),
        Elementwise("log1p", np.log1p, lambda x, y: 1.0 / (1.0 + x)),
        Elementwise("expm1", np.expm1, lambda x, y: y + 1.0),
        Elementwise("sqrt", np.sqrt, lambda x, y: 0.5 / y),
        Elementwise("square", np.square, lambda x, y: 2.0 * x),
        Elementwise("abs", np.abs, lambda x, y: np.sign(x)),
        Elementwise("logistic", special.expit, lambda x, y: y * (1.0 - y)),
        Elementwise("logit", special.logit, lambda x, y: 1.0 / (x * (1.0 - x))),
        Elementwise("softplus", lambda x: np.logaddexp(0.0, x), lambda x, y: special.expit(x)),
        Elementwise("sin", np.sin, lambda x, y: np.cos(x)),
        Elementwise("cos", np.cos, lambda x, y: -np.sin(x)),
        Elementwise("tanh", np.tanh, lambda x, y: 1.0 - y * y),
        Elementwise("lgamma", special.gammaln, lambda x, y: special.digamma(x)),
    )
}


class Sum(Operation):
    __slots__ = ()
    name = "sum"

    def forward(self, a):
        return np.asarray(np.sum(a))

    def backward(self, g, inputs, out, needs):
        return [np.broadcast_to(g, inputs[0].shape)]


class Mean(Operation):
    __slots__ = ()
    name = "mean"

    def forward(self, a):
        return np.asarray(np.mean(a))

    def backward(self, g, inputs, out, needs):
        a = inputs[0]
        return [np.broadcast_to(g / a.size, a.shape)]


class Dot(Operation):
    __slots__ = ()
    name = "dot"

    def forward(self, a, b):
        return np.float64(sum_of_products(a, b))

    def backward(self, g, inputs, out, needs):
        a, b = inputs
        return [g * b if needs[0] else None, g * a if needs[1] else None]


class Softmax(Operation):
    __slots__ = ()
    name = "softmax"

    def forward(self, a):
        e = np.exp(a - np.max(a))
        return e / np.sum(e)

    def backward(self, g, inputs, out, needs):
        return [out * (g - np.dot(g, out))]


class LogSoftmax(Operation):
    __slots__ = ()
    name = "log_softmax"

    def forward(self, a):
        return a - special.logsumexp(a)

    def backward(self, g, inputs, out, needs):
        return [g - np.exp(out) * np.sum(g)]


class RunningSum(Operation):
    __slots__ = ()
    name = "running_sum"

    def forward(self, a):
        return np.cumsum(a)

    def backward(self, g, inputs, out, needs):
        return [np.cumsum(g[::-1])[::-1]]


class Compare(Operation):
    """A comparison; its result is boolean and carries no gradient."""

    __slots__ = ("name", "function")

    def __init__(self, name, function):
        self.name = name
        self.function = function

    def forward(self, a, b):
        return self.function(a, b)

    def backward(self, g, inputs, out, needs):
        return [None, None]


COMPARE: dict[str, Compare] = {
    "<": Compare("<", np.less),
    "<=": Compare("<=", np.less_equal),
    ">": Compare(">", np.greater),
    ">=": Compare(">=", np.greater_equal),
    "==": Compare("==", np.equal),
    "!=": Compare("!=", np.not_equal),
}


class Select(Operation):
    __slots__ = ()
    name = "select"

    def forward(self, condition, a, b):
        return np.where(condition, a, b)

    def backward(self, g, inputs, out, needs):
        condition, a, b = inputs
        zero = np.zeros_like(g)
        ga = _reduce_to(np.where(condition, g, zero), a.shape) if needs[1] else None
        gb = _reduce_to(np.where(condition, zero, g), b.shape) if needs[2] else None
        return [None, ga, gb]


class TakeElements(Operation):
    """x[i] or x[index_array] on a vector, with 0-based positions fixed at compile time.

    The gradient is a scatter-add, done with bincount because repeated indices (many rows in one
    group) must add up.
    """

    __slots__ = ("positions", "length")

    name = "index"

    def __init__(self, positions: Array, length: int):
        self.positions = positions
        self.length = length

    def forward(self, a):
        return a[self.positions]

    def backward(self, g, inputs, out, needs):
        if self.positions.ndim == 0:
            grad = np.zeros(self.length)
            grad[self.positions] = g
            return [grad]
        return [np.bincount(self.positions.ravel(), weights=np.ravel(g), minlength=self.length)]


class TakeRows(Operation):
    """X[i] (one row) or X[index_array] (rows gathered) of a matrix."""

    __slots__ = ("positions", "matrix_shape")

    name = "row index"

    def __init__(self, positions: Array, matrix_shape: tuple[int, int]):
        self.positions = positions
        self.matrix_shape = matrix_shape

    def forward(self, a):
        return a[self.positions]

    def backward(self, g, inputs, out, needs):
        grad = np.zeros(self.matrix_shape)
        if self.positions.ndim == 0:
            grad[self.positions] = g
        else:
            np.add.at(grad, self.positions, g)
        return [grad]


class TakeMatrixElements(Operation):
    """X[i, j] with scalar or equal-length index vectors, via flat row-major positions."""

    __slots__ = ("flat_positions", "matrix_shape")

    name = "element index"

    def __init__(self, flat_positions: Array, matrix_shape: tuple[int, int]):
        self.flat_positions = flat_positions
        self.matrix_shape = matrix_shape

    def forward(self, a):
        return a.reshape(-1)[self.flat_positions]

    def backward(self, g, inputs, out, needs):
        size = self.matrix_shape[0] * self.matrix_shape[1]
        flat = np.bincount(np.ravel(self.flat_positions), weights=np.ravel(g), minlength=size)
        return [flat.reshape(self.matrix_shape)]


class TakeByUnknown(Operation):
    """x[k] or X[k] (rows) where the 1-based index k is an integer unknown (or elements of one).

    The index is held fixed while the continuous unknowns move (worker/samplers/compound.py), so
    it carries no gradient; its values stay inside the unknown's declared bounds, which were
    checked against the indexed length when the graph was built.
    """

    __slots__ = ("shape",)

    name = "index by an integer unknown"

    def __init__(self, shape: tuple[int, ...]):
        self.shape = shape  # the indexed vector's or matrix's shape

    def forward(self, a, index):
        return a[np.asarray(index, dtype=np.intp) - 1]

    def backward(self, g, inputs, out, needs):
        if not needs[0]:
            return [None, None]
        positions = np.asarray(inputs[1], dtype=np.intp) - 1
        if len(self.shape) == 1:
            grad = np.bincount(positions.ravel(), weights=np.ravel(g), minlength=self.shape[0])
        else:
            grad = np.zeros(self.shape)
            np.add.at(grad, positions, g)
        return [grad, None]


class Stack(Operation):
    """A vector or matrix literal built from scalars, in row-major order."""

    __slots__ = ("shape",)

    name = "literal"

    def __init__(self, shape: tuple[int, ...]):
        self.shape = shape

    def forward(self, *items):
        return np.array(items, dtype=float).reshape(self.shape)

    def backward(self, g, inputs, out, needs):
        flat = np.ravel(g)
        return [np.asarray(flat[k]) if needs[k] else None for k in range(len(inputs))]


BINARY: dict[str, Operation] = {
    "+": Add(), "-": Subtract(), "*": Multiply(), "/": Divide(), "^": Power(),
    "@": MatrixProduct(),
}
NEGATE = Negate()
SUM, MEAN, DOT = Sum(), Mean(), Dot()
SOFTMAX, LOG_SOFTMAX, RUNNING_SUM = Softmax(), LogSoftmax(), RunningSum()
SELECT = Select()
