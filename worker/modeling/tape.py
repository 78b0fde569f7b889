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
from .operations import Add, MatrixProduct, Multiply, ProductCombined, Subtract
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
                 dimension: int, extra_outputs: tuple[int, ...] = (), constant: float = 0.0,
                 held: tuple[UnknownSlot, ...] = (), kernels: tuple[Any, ...] = ()):
        """`constant` is added to every log density (a constant log-Jacobian).

        `kernels` are term kernels built outside (worker/modeling/summing.py: terms summed over
        an integer unknown), run after the terms; the plan computes the nodes each lists in its
        `inputs`.

        `held` are integer unknowns: their values follow the `dimension` continuous coordinates
        in the point a call is given, and the gradient leaves them out (they are held fixed
        while the continuous unknowns move: worker/samplers/compound.py).
        """
        self.dimension = dimension
        self.slots = slots
        self._held = [(slot.node, slot.start, slot.stop, slot.shape) for slot in held]
        nodes = graph.nodes
        wanted: set[int] = set()
        for term in terms:
            wanted.add(term.variate)
            wanted.update(term.argument_nodes)
        wanted.update(extra_outputs)
        for kernel in kernels:
            wanted.update(kernel.inputs)
        needed = _ancestors(graph, wanted)
        self.size = len(nodes)
        # Scalars travel as numpy scalars, not 0-d arrays: their arithmetic costs far less.
        self._template: list[Any] = [
            n.value[()] if n.value is not None and n.value.ndim == 0 else n.value for n in nodes
        ]
        self._values: list[Any] = list(self._template)
        # Steps: (output node, operation, input nodes, which inputs need a gradient).
        self.steps = _fuse_products(graph, [
            (i, nodes[i].operation, nodes[i].inputs,
             tuple(not nodes[j].constant for j in nodes[i].inputs))
            for i in sorted(needed)
            if nodes[i].operation is not None and not nodes[i].constant
        ], wanted)
        # Each step bound once into a closure over its slots: a call then spends no time on
        # unpacking step records or building argument lists.
        self._forward_calls = [_bound_forward(out, operation.forward, inputs)
                               for out, operation, inputs, _ in self.steps]
        self._backward_calls = [_bound_backward(out, operation.backward, inputs, needs)
                                for out, operation, inputs, needs in reversed(self.steps)]
        self._vectors, self._unbounded, self._bounded, self._transformed = _slot_kinds(slots)

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
        self.terms.extend(kernels)

    def arrays(self) -> list[np.ndarray]:
        """Every array the plan holds: node values, and the buffers and data of its kernels."""
        held = [value for value in self._template if isinstance(value, np.ndarray)]
        for term in self.terms:
            for name in getattr(type(term), "__slots__", ()):
                value = getattr(term, name, None)
                if isinstance(value, np.ndarray):
                    held.append(value)
        return held

    # ---- forward
    def _forward(self, u: np.ndarray) -> list[Any]:
        v = self._values
        self._hold(u, v)
        for slot in self.slots:
            piece = u[slot.start:slot.stop]
            if slot.transform is None:
                v[slot.node] = piece.reshape(slot.shape)
            else:
                v[slot.node] = slot.transform.constrain(piece)
        for step in self._forward_calls:
            step(v)
        return v

    def values_at(self, u: np.ndarray) -> list[Any]:
        """Every node's value at u (for reporting); the list is reused by the next call."""
        with np.errstate(all="ignore"):
            return self._forward(np.asarray(u, dtype=float))

    def _constrain(self, u: np.ndarray, v: list[Any], total: float,
                   slopes: list[float] | None, pullbacks: list[Any] | None) -> float:
        """Put every unknown's constrained value into v; total plus the log-Jacobians.

        Slots go by kind (unbounded vectors, other unbounded shapes, scalars with one bound,
        everything else), each kind in one tight loop; with slopes and pullbacks given, it keeps
        what the gradient needs.
        """
        self._hold(u, v)
        for node, start, stop in self._vectors:
            v[node] = u[start:stop]
        for node, start, stop, shape in self._unbounded:
            v[node] = u[start] if not shape else u[start:stop].reshape(shape)
        for node, start, bound, sign in self._bounded:
            ui = u[start]
            slope = sign * math.exp(ui)
            v[node] = _float64(bound + slope)
            total += ui
            if slopes is not None:
                slopes.append(slope)
        for node, start, stop, shape, forward in self._transformed:
            x, log_jacobian, pullback = forward(u[start:stop])
            v[node] = x if shape else x[()]
            total += log_jacobian
            if pullbacks is not None:
                pullbacks.append(pullback)
        return total

    def _hold(self, u: np.ndarray, v: list[Any]) -> None:
        for node, start, stop, shape in self._held:
            v[node] = u[start] if not shape else u[start:stop].reshape(shape)

    def log_density(self, u: np.ndarray) -> float:
        u = np.asarray(u, dtype=float)
        with np.errstate(all="ignore"):
            v = self._values
            total = self._constrain(u, v, self.constant_total, None, None)
            for step in self._forward_calls:
                step(v)
            for term in self.terms:
                total += term.value(v)
        return float(total) if math.isfinite(total) else -math.inf

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        u = np.asarray(u, dtype=float)
        with np.errstate(all="ignore"):
            v = self._values
            slopes: list[float] = []
            pullbacks: list[Any] = []
            total = self._constrain(u, v, self.constant_total, slopes, pullbacks)
            for step in self._forward_calls:
                step(v)
            adjoint: list[Any] = [None] * self.size
            for term in self.terms:
                total += term.run(v, adjoint)
            for step in self._backward_calls:
                step(v, adjoint)
            gradient = np.empty(self.dimension)
            for node, start, stop in self._vectors:
                g = adjoint[node]
                gradient[start:stop] = 0.0 if g is None else g
            for node, start, stop, shape in self._unbounded:
                g = adjoint[node]
                if not shape:
                    gradient[start] = 0.0 if g is None else g
                else:
                    gradient[start:stop] = 0.0 if g is None else g.reshape(-1)
            for (node, start, _, _), slope in zip(self._bounded, slopes, strict=True):
                g = adjoint[node]
                # d/du of (value terms + log-Jacobian u): g * dx/du + 1
                gradient[start] = 1.0 if g is None else g * slope + 1.0
            for (node, start, stop, shape, _), pullback in zip(self._transformed, pullbacks,
                                                               strict=True):
                g = adjoint[node]
                gradient[start:stop] = pullback(np.zeros(shape) if g is None else g)
            # one sum catches NaN or infinity anywhere in the value or the gradient
            if not math.isfinite(total + float(_sum(gradient))):
                return -math.inf, np.zeros(self.dimension)
        return float(total), gradient


# values in the plan keep numpy's scalar type, which carries .shape like every other value
_float64 = np.float64
_sum = np.add.reduce


def _slot_kinds(slots: list[UnknownSlot]) -> tuple[list, list, list, list]:
    """The slots by how the plan constrains them: (unbounded vectors, other unbounded shapes,
    scalars with one bound, the rest through their transform's forward pass).

    A scalar with one bound, x = bound + exp(u) (lower) or bound - exp(u) (upper), the commonest
    constrained unknown (a scale), is done in plain floats; its log-Jacobian is u.
    """
    vectors, unbounded, bounded, transformed = [], [], [], []
    for slot in slots:
        t = slot.transform
        if t is None and len(slot.shape) == 1:
            vectors.append((slot.node, slot.start, slot.stop))
        elif t is None:
            unbounded.append((slot.node, slot.start, slot.stop, slot.shape))
        elif slot.shape == () and t.structure in ("lower", "upper"):
            bound = float(t.lower if t.structure == "lower" else t.upper)
            sign = 1.0 if t.structure == "lower" else -1.0
            bounded.append((slot.node, slot.start, bound, sign))
        else:
            transformed.append((slot.node, slot.start, slot.stop, slot.shape, t.forward))
    return vectors, unbounded, bounded, transformed


def _bound_forward(out: int, forward, inputs: tuple[int, ...]):
    """v[out] = forward(*v[inputs]) as a closure, with the common arities spelled out."""
    if len(inputs) == 1:
        (a,) = inputs

        def step(v: list[Any]) -> None:
            v[out] = forward(v[a])
    elif len(inputs) == 2:
        a, b = inputs

        def step(v: list[Any]) -> None:
            v[out] = forward(v[a], v[b])
    elif len(inputs) == 3:
        a, b, c = inputs

        def step(v: list[Any]) -> None:
            v[out] = forward(v[a], v[b], v[c])
    else:
        def step(v: list[Any]) -> None:
            v[out] = forward(*[v[i] for i in inputs])
    return step


def _gather(inputs: tuple[int, ...]):
    """v -> [v[i] for i in inputs], spelled out for the common arities (a comprehension is a
    function call of its own each time)."""
    if len(inputs) == 1:
        (a,) = inputs
        return lambda v: [v[a]]
    if len(inputs) == 2:
        a, b = inputs
        return lambda v: [v[a], v[b]]
    if len(inputs) == 3:
        a, b, c = inputs
        return lambda v: [v[a], v[b], v[c]]
    return lambda v: [v[i] for i in inputs]


def _bound_backward(out: int, backward, inputs: tuple[int, ...], needs: tuple[bool, ...]):
    """Add the vector-Jacobian product of one step into the adjoints of the inputs that need it."""
    targets = tuple((k, i) for k, (i, need) in enumerate(zip(inputs, needs, strict=True)) if need)
    gather = _gather(inputs)

    def step(v: list[Any], adjoint: list[Any]) -> None:
        g = adjoint[out]
        if g is None:
            return
        grads_in = backward(g, gather(v), v[out], needs)
        for k, i in targets:
            gk = grads_in[k]
            if gk is None:  # a select's condition carries no gradient
                continue
            previous = adjoint[i]
            adjoint[i] = gk if previous is None else previous + gk
    return step


def _fuse_products(graph: Graph, steps: list[tuple], wanted: set[int]) -> list[tuple]:
    """Merge each product (elementwise or matrix) whose only use is one addition or subtraction
    into that step.

    ``a + b * c`` is the commonest chain in models (a location plus a scaled effect), and
    ``a + X @ b`` the linear predictor; as one step each costs one closure call forward and one
    backward instead of two, and the sum can overwrite the product's array. A product that a term,
    an output or a second step also reads is left alone.
    """
    by_output = {step[0]: step for step in steps}
    uses: dict[int, int] = {}
    for _, _, inputs, _ in steps:
        for i in inputs:
            uses[i] = uses.get(i, 0) + 1
    fused: dict[int, tuple] = {}
    absorbed: set[int] = set()
    for out, operation, inputs, needs in steps:
        if not isinstance(operation, Add | Subtract):
            continue
        for position in (1, 0):  # prefer a - (b * c) when both sides are products
            product = inputs[position]
            record = by_output.get(product)
            if (record is None or not isinstance(record[1], Multiply | MatrixProduct)
                    or product in wanted
                    or uses.get(product) != 1 or product in absorbed):
                continue
            other = inputs[1 - position]
            b, c = record[2]
            operation_fused = ProductCombined(isinstance(operation, Subtract), position == 0,
                                              graph.type_of(product).shape, record[1],
                                              graph.type_of(out).shape)
            fused[out] = (out, operation_fused, (other, b, c),
                          (needs[1 - position], *record[3]))
            absorbed.add(product)
            break
    return [fused.get(step[0], step) for step in steps if step[0] not in absorbed]


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
