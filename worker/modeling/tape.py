"""Reverse-mode differentiation over the typed graph: a precompiled, flat evaluation plan.

Everything that does not change between calls is settled when the plan is built: which nodes must be
recomputed, in which order, which inputs of each step need a gradient, which arguments of each
distribution term depend on unknowns. A call then only runs the steps and their vector-Jacobian
products over one list of value slots; it builds no dictionaries of names and infers no shapes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .graph import Graph
from .term_kernels import term_kernel


@dataclass(frozen=True)
class UnknownSlot:
    """Where one unknown lives in u and how it reaches its constrained value."""

    name: str
    node: int
    start: int
    stop: int
    shape: tuple[int, ...]
    transform: Any | None  # None: unbounded, the value is u[start:stop] itself


@dataclass(frozen=True)
class Term:
    """One prior or likelihood term: distribution(variate; arguments), summed over elements."""

    variate: int
    distribution: Any
    argument_names: tuple[str, ...]
    argument_nodes: tuple[int, ...]
    sign_guaranteed: bool = False  # the variate cannot be negative (a lower bound of 0 or more)


class Plan:
    """The compiled log density of a graph: unknown slots, steps, and terms."""

    def __init__(self, graph: Graph, slots: list[UnknownSlot], terms: list[Term],
                 dimension: int, extra_outputs: tuple[int, ...] = (), constant: float = 0.0):
        """`constant` is added to every log density (a constant log-Jacobian)."""
        self.dimension = dimension
        self.slots = slots
        nodes = graph.nodes
        wanted: set[int] = set()
        for term in terms:
            wanted.add(term.variate)
            wanted.update(term.argument_nodes)
        wanted.update(extra_outputs)
        needed = _ancestors(graph, wanted)
        self.size = len(nodes)
        # Scalars travel as numpy scalars, not 0-d arrays: their arithmetic costs far less.
        self._template: list[Any] = [
            n.value[()] if n.value is not None and n.value.ndim == 0 else n.value for n in nodes
        ]
        self._values: list[Any] = list(self._template)
        # Steps: (output node, operation, input nodes, which inputs need a gradient).
        self.steps = [
            (i, nodes[i].operation, nodes[i].inputs,
             tuple(not nodes[j].constant for j in nodes[i].inputs))
            for i in sorted(needed)
            if nodes[i].operation is not None and not nodes[i].constant
        ]
        self._backward_plan = [
            (out, operation, inputs, needs,
             tuple((k, i) for k, (i, need) in enumerate(zip(inputs, needs, strict=True)) if need))
            for out, operation, inputs, needs in reversed(self.steps)
        ]
        self._slot_plan = [_slot_entry(s) for s in slots]

        # Terms that involve no unknown add the same number at every point: settle it now.
        self.constant_total = float(constant)
        self.terms = []
        for term in terms:
            if nodes[term.variate].constant and all(nodes[k].constant
                                                    for k in term.argument_nodes):
                args = dict(zip(term.argument_names, (nodes[k].value for k in term.argument_nodes),
                                strict=True))
                with np.errstate(all="ignore"):
                    self.constant_total += float(np.sum(
                        term.distribution.log_density(nodes[term.variate].value, args)))
                continue
            self.terms.append(term_kernel(term.variate, term.distribution, term.argument_names,
                                          term.argument_nodes, graph, term.sign_guaranteed))

    # ---- forward
    def _forward(self, u: np.ndarray) -> list[Any]:
        v = self._values
        for slot in self.slots:
            piece = u[slot.start:slot.stop]
            if slot.transform is None:
                v[slot.node] = piece.reshape(slot.shape)
            else:
                v[slot.node] = slot.transform.constrain(piece)
        for out, operation, inputs, _ in self.steps:
            v[out] = operation.forward(*[v[i] for i in inputs])
        return v

    def values_at(self, u: np.ndarray) -> list[Any]:
        """Every node's value at u (for reporting); the list is reused by the next call."""
        with np.errstate(all="ignore"):
            return self._forward(np.asarray(u, dtype=float))

    def log_density(self, u: np.ndarray) -> float:
        u = np.asarray(u, dtype=float)
        with np.errstate(all="ignore"):
            v = self._values
            total = self.constant_total
            for kind, node, start, stop, shape, forward, bound, sign in self._slot_plan:
                if kind == IDENTITY:
                    v[node] = u[start] if not shape else u[start:stop].reshape(shape)
                elif kind == SCALAR_BOUND:
                    ui = u[start]
                    v[node] = _float64(bound + sign * math.exp(ui))
                    total += ui
                else:
                    x, log_jacobian, _ = forward(u[start:stop])
                    v[node] = x if shape else x[()]
                    total += log_jacobian
            for out, operation, inputs, _ in self.steps:
                v[out] = operation.forward(*[v[i] for i in inputs])
            for term in self.terms:
                total += term.value(v)
        return float(total) if math.isfinite(total) else -math.inf

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        u = np.asarray(u, dtype=float)
        with np.errstate(all="ignore"):
            v = self._values
            total = self.constant_total
            pullbacks = []
            for kind, node, start, stop, shape, forward, bound, sign in self._slot_plan:
                if kind == IDENTITY:
                    v[node] = u[start] if not shape else u[start:stop].reshape(shape)
                elif kind == SCALAR_BOUND:
                    ui = u[start]
                    slope = sign * math.exp(ui)
                    v[node] = _float64(bound + slope)
                    total += ui
                    pullbacks.append(slope)
                else:
                    x, log_jacobian, pullback = forward(u[start:stop])
                    v[node] = x if shape else x[()]
                    total += log_jacobian
                    pullbacks.append(pullback)
            for out, operation, inputs, _ in self.steps:
                v[out] = operation.forward(*[v[i] for i in inputs])
            adjoint: list[Any] = [None] * self.size
            for term in self.terms:
                total += term.run(v, adjoint)
            for out, operation, inputs, needs, targets in self._backward_plan:
                g = adjoint[out]
                if g is None:
                    continue
                grads_in = operation.backward(g, [v[i] for i in inputs], v[out], needs)
                for k, i in targets:
                    gk = grads_in[k]
                    if gk is None:  # a select's condition carries no gradient
                        continue
                    previous = adjoint[i]
                    adjoint[i] = gk if previous is None else previous + gk
            gradient = np.empty(self.dimension)
            k = 0
            for kind, node, start, stop, shape, _, _, _ in self._slot_plan:
                g = adjoint[node]
                if kind == IDENTITY:
                    if not shape:
                        gradient[start] = 0.0 if g is None else g
                    else:
                        gradient[start:stop] = 0.0 if g is None else g.reshape(-1)
                elif kind == SCALAR_BOUND:
                    # d/du of (value terms + log-Jacobian u): g * dx/du + 1
                    gradient[start] = 1.0 if g is None else g * pullbacks[k] + 1.0
                    k += 1
                else:
                    gradient[start:stop] = pullbacks[k](np.zeros(shape) if g is None else g)
                    k += 1
            # one sum catches NaN or infinity anywhere in the value or the gradient
            if not math.isfinite(total + float(gradient.sum())):
                return -math.inf, np.zeros(self.dimension)
        return float(total), gradient


IDENTITY, SCALAR_BOUND, GENERAL = 0, 1, 2
# values in the plan keep numpy's scalar type, which carries .shape like every other value
_float64 = np.float64


def _slot_entry(slot: UnknownSlot) -> tuple:
    """How the plan constrains one unknown: (kind, node, start, stop, shape, forward, bound, sign).

    A scalar with one bound, x = bound + exp(u) (lower) or bound - exp(u) (upper), the commonest
    constrained unknown (a scale), is done in plain floats here; its log-Jacobian is u. Everything
    else goes through its transform's forward pass.
    """
    t = slot.transform
    if t is None:
        return (IDENTITY, slot.node, slot.start, slot.stop, slot.shape, None, 0.0, 0.0)
    if slot.shape == () and t.structure in ("lower", "upper"):
        bound = float(t.lower if t.structure == "lower" else t.upper)
        sign = 1.0 if t.structure == "lower" else -1.0
        return (SCALAR_BOUND, slot.node, slot.start, slot.stop, (), None, bound, sign)
    return (GENERAL, slot.node, slot.start, slot.stop, slot.shape, t.forward, 0.0, 0.0)


def _ancestors(graph: Graph, wanted: set[int]) -> set[int]:
    seen: set[int] = set()
    stack = list(wanted)
    while stack:
        i = stack.pop()
        if i in seen:
            continue
        seen.add(i)
        stack.extend(graph.nodes[i].inputs)
    return seen
