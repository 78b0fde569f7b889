"""Reverse-mode differentiation over the typed graph: a precompiled, flat evaluation plan.

Everything that does not change between calls is settled when the plan is built: which nodes must be
recomputed, in which order, which inputs of each step need a gradient, which arguments of each
distribution term depend on unknowns. A call then only runs the steps and their vector-Jacobian
products over one list of value slots; it builds no dictionaries of names and infers no shapes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .graph import Graph


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


class Plan:
    """The compiled log density of a graph: unknown slots, steps, and terms."""

    def __init__(self, graph: Graph, slots: list[UnknownSlot], terms: list[Term],
                 dimension: int, extra_outputs: tuple[int, ...] = ()):
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
        self._template: list[Any] = [n.value for n in nodes]
        self._values: list[Any] = list(self._template)
        # Steps: (output node, operation, input nodes, which inputs need a gradient).
        self.steps = [
            (i, nodes[i].operation, nodes[i].inputs,
             tuple(not nodes[j].constant for j in nodes[i].inputs))
            for i in sorted(needed)
            if nodes[i].operation is not None and not nodes[i].constant
        ]
        self.backward_steps = list(reversed(self.steps))
        self.terms = [
            (
                term.variate,
                term.distribution,
                term.argument_names,
                term.argument_nodes,
                frozenset(
                    [name for name, node in zip(term.argument_names, term.argument_nodes,
                                                strict=True)
                     if not nodes[node].constant]
                    + (["x"] if not nodes[term.variate].constant else [])
                ),
            )
            for term in terms
        ]

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
            total = 0.0
            for slot in self.slots:
                piece = u[slot.start:slot.stop]
                if slot.transform is None:
                    v[slot.node] = piece.reshape(slot.shape)
                else:
                    v[slot.node], log_jacobian, _ = slot.transform.forward(piece)
                    total += log_jacobian
            for out, operation, inputs, _ in self.steps:
                v[out] = operation.forward(*[v[i] for i in inputs])
            for variate, distribution, names, nodes, _ in self.terms:
                args = {name: v[node] for name, node in zip(names, nodes, strict=True)}
                total += float(np.sum(distribution.log_density(v[variate], args)))
        return float(total) if np.isfinite(total) else -np.inf

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        u = np.asarray(u, dtype=float)
        with np.errstate(all="ignore"):
            v = self._values
            total = 0.0
            pullbacks = []
            for slot in self.slots:
                piece = u[slot.start:slot.stop]
                if slot.transform is None:
                    v[slot.node] = piece.reshape(slot.shape)
                    pullbacks.append(None)
                else:
                    v[slot.node], log_jacobian, pullback = slot.transform.forward(piece)
                    total += log_jacobian
                    pullbacks.append(pullback)
            for out, operation, inputs, _ in self.steps:
                v[out] = operation.forward(*[v[i] for i in inputs])
            adjoint: list[Any] = [None] * self.size
            for variate, distribution, names, nodes, wrt in self.terms:
                args = {name: v[node] for name, node in zip(names, nodes, strict=True)}
                if not wrt:
                    total += float(np.sum(distribution.log_density(v[variate], args)))
                    continue
                pointwise, grads = distribution.log_density_and_gradients(v[variate], args, wrt)
                total += float(np.sum(pointwise))
                for name, node in zip(names, nodes, strict=True):
                    if name in wrt:
                        g = grads[name]
                        adjoint[node] = g if adjoint[node] is None else adjoint[node] + g
                if "x" in wrt:
                    g = grads["x"]
                    adjoint[variate] = g if adjoint[variate] is None else adjoint[variate] + g
            for out, operation, inputs, needs in self.backward_steps:
                g = adjoint[out]
                if g is None:
                    continue
                grads_in = operation.backward(g, [v[i] for i in inputs], v[out], needs)
                for i, gi, need in zip(inputs, grads_in, needs, strict=True):
                    if need:
                        adjoint[i] = gi if adjoint[i] is None else adjoint[i] + gi
            gradient = np.zeros(self.dimension)
            for slot, pullback in zip(self.slots, pullbacks, strict=True):
                g = adjoint[slot.node]
                if pullback is None:
                    if g is not None:
                        gradient[slot.start:slot.stop] = np.ravel(g)
                else:
                    gradient[slot.start:slot.stop] = pullback(
                        np.zeros(slot.shape) if g is None else g
                    )
            if not (np.isfinite(total) and np.all(np.isfinite(gradient))):
                return -np.inf, np.zeros(self.dimension)
        return float(total), gradient


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
