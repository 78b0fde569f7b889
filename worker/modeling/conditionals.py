"""Full conditionals of integer unknowns: the terms that involve each, and its log weights.

A Gibbs update of an integer unknown (Geman & Geman 1984; Gelfand & Smith 1990) draws it from its
distribution given every other unknown. Up to a constant that distribution is the sum of the prior
and likelihood terms that involve it, evaluated at each value of its support; the graph tells which
terms those are (every node downstream of the unknown's leaf). When each element of an array
reaches the terms only elementwise (element i of every involved term depends on element i of the
unknown and on nothing else of it), the elements are conditionally independent given the rest,
as mixture indicators are given the component parameters: then one evaluation per support value
weighs every element at once, and the whole array is drawn in one step. Otherwise (a matrix
product, a sum, a vector argument) each element is weighed on its own, the others held.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from . import operations as ops
from .graph import Graph
from .tape import Plan, UnknownSlot

# Operations whose output element i depends on element i of each array input of its shape only.
_ELEMENTWISE = (ops.Add, ops.Subtract, ops.Multiply, ops.Divide, ops.Power, ops.Negate,
                ops.Elementwise, ops.Compare, ops.Select)


@dataclass(frozen=True)
class IntegerBlock:
    """One integer unknown: where its values sit in a point, its bounds, and how it is updated."""

    name: str
    start: int
    stop: int
    shape: tuple[int, ...]
    lower: int
    upper: int
    # True when its elements are conditionally independent given everything else (always for a
    # scalar): one pass over the support weighs them all
    independent: bool

    @property
    def support(self) -> np.ndarray:
        return np.arange(self.lower, self.upper + 1, dtype=float)

    @property
    def size(self) -> int:
        return self.stop - self.start


def _downstream(graph: Graph, leaf: int) -> set[int]:
    """Every node that depends on ``leaf`` (nodes are appended after their inputs)."""
    found = {leaf}
    for i in range(leaf + 1, len(graph.nodes)):
        if any(j in found for j in graph.nodes[i].inputs):
            found.add(i)
    return found


def _upstream(graph: Graph, wanted: set[int]) -> set[int]:
    seen: set[int] = set()
    stack = list(wanted)
    while stack:
        i = stack.pop()
        if i not in seen:
            seen.add(i)
            stack.extend(graph.nodes[i].inputs)
    return seen


def _term_nodes(term: Any) -> set[int]:
    return {term.variate, *term.argument_nodes}


def _batch_shape(graph: Graph, term: Any) -> tuple[int, ...]:
    """The shape of a term's pointwise values: its arrays' shapes without their event axes."""
    d = term.distribution
    shapes = []
    variate = graph.type_of(term.variate).shape
    shapes.append(variate[:len(variate) - d.event_ndim])
    for name, node in zip(term.argument_names, term.argument_nodes, strict=True):
        shape = graph.type_of(node).shape
        k = d.argument_event_ndim.get(name, 0)
        shapes.append(shape[:len(shape) - k])
    return tuple(np.broadcast_shapes(*shapes))


def _elementwise(graph: Graph, leaf: int, used: set[int], terms: list[Any],
                 shape: tuple[int, ...] | None) -> bool:
    """Whether the unknown reaches every involved term through elementwise operations only, so
    that an extra leading axis of candidate values broadcasts through unchanged; with ``shape``
    given, also whether every involved term's element i depends on element i of the unknown
    alone."""
    downstream = used
    for i in sorted(used - {leaf}):
        node = graph.nodes[i]
        if shape is not None and node.type.shape != shape:
            return False
        op = node.operation
        if isinstance(op, ops.TakeByUnknown):
            # mu[z]: element i is mu[z_i], so long as mu itself does not depend on z
            if node.inputs[0] in downstream or len(op.shape) != 1:
                return False
        elif not isinstance(op, _ELEMENTWISE):
            return False
    for term in terms:
        d = term.distribution
        if term.variate in downstream and d.event_ndim:
            return False
        if any(node in downstream and d.argument_event_ndim.get(name, 0)
               for name, node in zip(term.argument_names, term.argument_nodes, strict=True)):
            return False
        if shape is not None and _batch_shape(graph, term) != shape:
            return False
    return True


class Conditional:
    """The log weights of one integer unknown's support values given a point.

    Where the unknown reaches its terms through elementwise operations only (``batched``), every
    support value is weighed in one pass: the unknown's node takes an extra leading axis holding
    the candidate values, and only the nodes downstream of it are recomputed, broadcasting that
    axis through. Otherwise each value costs one evaluation of the involved terms.
    """

    def __init__(self, block: IntegerBlock, plan: Plan, terms: list[Any], graph: Graph,
                 leaf: int, steps: list[int] | None, rank: int):
        self.block = block
        self._plan = plan
        self._terms = terms
        self._leaf = leaf
        # the downstream nodes to recompute, in order, with their operations and inputs
        self._steps = None if steps is None else [
            (i, graph.nodes[i].operation.forward, graph.nodes[i].inputs) for i in steps]
        self._rank = rank  # the candidates' axis goes before this many axes
        self.batched = steps is not None

    def _pointwise(self, values: list[Any]) -> list[np.ndarray]:
        """Each involved term's pointwise log densities."""
        found = []
        with np.errstate(all="ignore"):
            for term in self._terms:
                args = {n: values[k] for n, k in zip(term.argument_names, term.argument_nodes,
                                                     strict=True)}
                found.append(np.asarray(term.distribution.log_density(values[term.variate],
                                                                      args), dtype=float))
        return found

    def _total(self, point: np.ndarray) -> float:
        return float(sum(np.sum(p) for p in self._pointwise(self._plan.values_at(point))))

    def _batched(self, point: np.ndarray) -> np.ndarray:
        """(support size, elements) in one pass (see the class docstring)."""
        b = self.block
        values = list(self._plan.values_at(point))
        count = b.upper - b.lower + 1
        if b.shape:
            values[self._leaf] = np.broadcast_to(
                b.support.reshape((count,) + (1,) * len(b.shape)), (count, *b.shape))
        else:
            values[self._leaf] = b.support.reshape((count,) + (1,) * self._rank)
        with np.errstate(all="ignore"):
            for out, forward, inputs in self._steps:
                values[out] = forward(*[values[i] for i in inputs])
        weights = np.zeros((count, b.size))
        for pointwise in self._pointwise(values):
            if b.shape:  # every involved term's pointwise values have the unknown's shape
                weights += np.broadcast_to(pointwise, (count, *b.shape)).reshape(count, b.size)
            else:  # a term's values carry the candidates' axis first, then its own elements
                pointwise = np.broadcast_to(pointwise, (count,) + pointwise.shape[1:])
                weights[:, 0] += pointwise.reshape(count, -1).sum(axis=1)
        return weights

    def log_weights(self, point: np.ndarray) -> np.ndarray:
        """(support size, elements): the log weight of each value for each element, up to a
        constant per element, every element set to the value at once. Only for a block whose
        elements are conditionally independent (``block.independent``)."""
        b = self.block
        if self.batched:
            weights = np.array(self._batched(point))
        else:
            scratch = np.array(point, dtype=float)
            weights = np.empty((b.upper - b.lower + 1, b.size))
            for k, value in enumerate(b.support):  # a scalar (or one-element) block here
                scratch[b.start:b.stop] = value
                weights[k] = self._total(scratch)
        weights[~np.isfinite(weights)] = -np.inf
        return weights

    def element_log_weights(self, point: np.ndarray, element: int) -> np.ndarray:
        """(support size,): the log weight of each value of one element, the others held."""
        b = self.block
        scratch = np.array(point, dtype=float)
        weights = np.empty(b.upper - b.lower + 1)
        for k, value in enumerate(b.support):
            scratch[b.start + element] = value
            weights[k] = self._total(scratch)
        weights[~np.isfinite(weights)] = -np.inf
        return weights


def conditionals(graph: Graph, slots: list[UnknownSlot], held: list[UnknownSlot],
                 bounds: dict[str, tuple[int, int]], terms: list[Any],
                 dimension: int) -> list[Conditional]:
    """One Conditional per integer unknown, in declaration order."""
    made: list[Conditional] = []
    for slot in held:
        downstream = _downstream(graph, slot.node)
        involved = [t for t in terms if _term_nodes(t) & downstream]
        outputs = set().union(*(_term_nodes(t) for t in involved)) if involved else set()
        needed = _upstream(graph, outputs)
        used = downstream & needed
        batched = _elementwise(graph, slot.node, used, involved,
                               slot.shape if slot.shape else None)
        independent = batched or not slot.shape
        lower, upper = bounds[slot.name]
        block = IntegerBlock(slot.name, slot.start, slot.stop, slot.shape, lower, upper,
                             independent)
        plan = Plan(graph, [s for s in slots if s.node in needed], [], dimension,
                    extra_outputs=tuple(sorted(outputs)),
                    held=tuple(s for s in held if s.node in needed))
        rank = max([len(graph.type_of(i).shape) for i in used]
                   + [len(_batch_shape(graph, t)) for t in involved] + [0])
        steps = sorted(used - {slot.node}) if batched else None
        made.append(Conditional(block, plan, involved, graph, slot.node, steps, rank))
    return made
