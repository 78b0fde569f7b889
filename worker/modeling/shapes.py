"""Types and shapes of values in the expression language, and the rules that combine them.

A value has a kind (integer, real or boolean) and a shape (a tuple: () scalar, (n,) vector,
(m, n) matrix). Broadcasting is deliberately narrow: a scalar combines with anything, and otherwise
shapes must be equal, because silent numpy-style broadcasting hides modelling mistakes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

Shape = tuple[int, ...]


class ShapeError(ValueError):
    """A type or shape rule was broken; the message is one plain sentence."""


@dataclass(frozen=True)
class ValueType:
    kind: str  # "integer" | "real" | "boolean"
    shape: Shape

    @property
    def size(self) -> int:
        n = 1
        for d in self.shape:
            n *= d
        return n


def describe(shape: Shape) -> str:
    """Shape as users write it: [] for a scalar, [8] for a vector, [3, 2] for a matrix."""
    return "[" + ", ".join(str(d) for d in shape) + "]"


def broadcast(a: Shape, b: Shape, what: str) -> Shape:
    """Result shape of an elementwise combination, or a ShapeError naming ``what``."""
    if a == b or not b:
        return a
    if not a:
        return b
    raise ShapeError(
        f"{what}: shapes {describe(a)} and {describe(b)} do not match "
        "(only a scalar combines with a vector or matrix)"
    )


def arithmetic_kind(a: str, b: str, operator: str) -> str:
    """Kind of a + b, a - b, a * b stay integer for integers; / and ^ always give reals."""
    if a == "boolean" or b == "boolean":
        raise ShapeError(
            f"a comparison cannot be used with '{operator}'; use select(condition, a, b)"
        )
    if operator in ("+", "-", "*") and a == "integer" and b == "integer":
        return "integer"
    return "real"


def matrix_product_shape(a: Shape, b: Shape) -> Shape:
    if len(a) == 2 and len(b) == 1:
        if a[1] != b[0]:
            raise ShapeError(
                f"matrix product: a {describe(a)} matrix times a vector of length {b[0]}; "
                f"the vector needs length {a[1]}"
            )
        return (a[0],)
    if len(a) == 2 and len(b) == 2:
        if a[1] != b[0]:
            raise ShapeError(
                f"matrix product: {describe(a)} @ {describe(b)} needs the inner sizes to agree"
            )
        return (a[0], b[1])
    if len(a) == 1 and len(b) == 1:
        raise ShapeError("matrix product of two vectors is not defined; use dot(a, b)")
    raise ShapeError(
        f"matrix product needs a matrix on the left and a vector or matrix on the right, "
        f"got {describe(a)} @ {describe(b)}"
    )


def batch_shape(argument_shapes: dict[str, Shape], event_ndims: dict[str, int]) -> Shape:
    """The batch shape of a distribution's arguments: each argument's shape without its own event
    axes (a categorical's weight vector, a cutpoint vector), broadcast together."""
    stripped = [shape[:len(shape) - event_ndims.get(name, 0)]
                for name, shape in argument_shapes.items()]
    return tuple(np.broadcast_shapes(*stripped))
