"""Which graph nodes are affine functions of the unknowns, and which are not.

A prior on a derived quantity d = f(unknowns) multiplies the density by p(f(x)); it gives d the
stated distribution only when the Jacobian |df/dx| is added as well (change of variables, e.g.
BDA3 section 1.8, equation 1.21). Where f is affine that Jacobian is a constant and may be left
out; where f is not, leaving it out changes the posterior. The assembly uses this to refuse a
prior on a nonlinear derived quantity unless the spec says the omission is meant.
"""

from __future__ import annotations

from . import operations as ops
from .graph import Graph

CONSTANT, AFFINE, NONLINEAR = 0, 1, 2

# operations that are linear in each of their inputs together (sums, selections, rearrangements)
_LINEAR = (ops.Add, ops.Subtract, ops.Negate, ops.Sum, ops.Mean, ops.RunningSum,
           ops.TakeElements, ops.TakeRows, ops.TakeMatrixElements, ops.Stack)
# operations that are linear in each input while the others are held fixed: affine overall only
# when at most one input depends on the unknowns
_BILINEAR = (ops.Multiply, ops.MatrixProduct, ops.Dot)


def _combine(graph: Graph, node: int, inputs: list[int]) -> int:
    operation = graph.nodes[node].operation
    varying = [k for k in inputs if k != CONSTANT]
    if not varying:
        return CONSTANT
    if NONLINEAR in varying:
        return NONLINEAR
    if isinstance(operation, _LINEAR):
        return AFFINE
    if isinstance(operation, _BILINEAR):
        return AFFINE if len(varying) == 1 else NONLINEAR
    if isinstance(operation, ops.Divide):
        return AFFINE if inputs[1] == CONSTANT else NONLINEAR
    if isinstance(operation, ops.Select):
        # a condition that moves with the unknowns makes the function piecewise
        return AFFINE if inputs[0] == CONSTANT else NONLINEAR
    return NONLINEAR


def classify(graph: Graph, node: int) -> int:
    """CONSTANT, AFFINE or NONLINEAR in the unknowns' constrained values (a post-order walk on an
    explicit stack, so the graph's depth cannot matter)."""
    kinds: dict[int, int] = {}
    stack: list[tuple[int, bool]] = [(node, False)]
    while stack:
        i, done = stack.pop()
        if i in kinds:
            continue
        n = graph.nodes[i]
        if n.constant:
            kinds[i] = CONSTANT
        elif n.operation is None:
            kinds[i] = AFFINE  # an unknown's value
        elif done:
            kinds[i] = _combine(graph, i, [kinds[k] for k in n.inputs])
        else:
            stack.append((i, True))
            stack.extend((k, False) for k in n.inputs if k not in kinds)
    return kinds[node]
