"""Integer unknowns summed out of the density, and drawn afterwards for each draw.

An integer unknown z declared with ``"summed_out": true`` is not sampled. The terms that involve
it (the same graph knowledge as worker/modeling/conditionals.py: every term downstream of its
leaf) are replaced in the density by their log-sum-exp over z's support,

    log sum_z exp(terms(theta, z)),

which is the exact marginal density of the continuous unknowns theta. When z's elements are
conditionally independent given everything else (each reaches the terms elementwise only, as
mixture indicators do given the component parameters), the sum over the K^n joint values
factors into n sums of K terms, one per element; that is the only case allowed, so the cost is
K evaluations of the involved terms per call.

The gradient of the log-sum-exp is the posterior-weighted gradient of the terms:
sum_i sum_k p_ik d terms_ik / d theta, with p_ik the conditional probability that element i
takes value k (the softmax over k). It is computed with the weights held: each value k gets one
pass forward and one reverse pass over the nodes downstream of z, with every term's pointwise
gradient multiplied by p_ik, and the result flows into the rest of the plan's reverse pass
through the nodes the involved terms read that do not depend on z (the boundary).

After sampling, each draw's z is drawn from its full conditional given that draw's theta, with
the very Conditional (worker/modeling/conditionals.py) a Gibbs step would use, so the downloads
and summaries carry z as if it had been sampled.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from ..problems import Problem, pointer
from .conditionals import Conditional, _downstream, _term_nodes, _upstream, conditionals
from .graph import Graph
from .tape import UnknownSlot

# The most support values one summed-out unknown may have. Every evaluation of the density (and
# a NUTS iteration makes up to 2^10 of them) costs one pass of the involved terms per value, so
# the sum multiplies the likelihood's cost by this many; we chose 1,000 so that a change-point
# over a thousand periods fits while a sum that would make each gradient a thousandfold dearer
# than the Gibbs form is refused (the Gibbs form weighs the values once per iteration instead).
SUMMED_VALUE_LIMIT = 1_000
FLAG = "summed_out"


def _unbroadcast(g: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    """Sum a gradient computed over a broadcast shape back to the input's own shape."""
    g = np.asarray(g, dtype=float)
    if g.shape == shape:
        return g
    extra = g.ndim - len(shape)
    g = g.sum(axis=tuple(range(extra))) if extra > 0 else g
    axes = tuple(i for i, n in enumerate(shape) if n == 1 and g.shape[i] != 1)
    return g.sum(axis=axes, keepdims=True) if axes else g


def _accumulate(adjoint: Any, node: int, g: Any) -> None:
    previous = adjoint[node]
    adjoint[node] = g if previous is None else previous + g


class SummedTerms:
    """The involved terms of one summed-out unknown as one term kernel of the density plan.

    Same interface as the kernels of worker/modeling/term_kernels.py: ``value(v)`` and
    ``run(v, adjoint)`` over the plan's value slots; ``inputs`` are the boundary nodes the plan
    must compute before it.
    """

    def __init__(self, graph: Graph, leaf: int, shape: tuple[int, ...], lower: int, upper: int,
                 terms: list[Any], used: set[int]):
        self.leaf = leaf
        self.shape = shape
        self.support = np.arange(lower, upper + 1, dtype=float)
        self.terms = terms
        self.downstream = set(used)
        nodes = graph.nodes
        steps = sorted(used - {leaf})
        # an input needs a gradient when it varies, except z itself (a held index, a condition)
        self.steps = [(i, nodes[i].operation, nodes[i].inputs,
                       tuple(j != leaf and not nodes[j].constant for j in nodes[i].inputs))
                      for i in steps]
        boundary: set[int] = set()
        for _, _, inputs, _ in self.steps:
            boundary.update(j for j in inputs if j not in self.downstream)
        for term in terms:
            boundary.update(j for j in _term_nodes(term) if j not in self.downstream)
        self.inputs = tuple(sorted(j for j in boundary if not nodes[j].constant))
        self.kernels = []
        for term in terms:
            d = term.distribution
            wrt = [n for n, k in zip(term.argument_names, term.argument_nodes, strict=True)
                   if not nodes[k].constant]
            if not (nodes[term.variate].constant or d.discrete or term.variate in used):
                wrt.append("x")
            self.kernels.append((term, frozenset(wrt)))

    def _value_of(self, k: float) -> Any:
        return np.full(self.shape, k) if self.shape else np.float64(k)

    def _forward(self, lv: list[Any], k: float) -> None:
        lv[self.leaf] = self._value_of(k)
        for out, operation, inputs, _ in self.steps:
            lv[out] = operation.forward(*[lv[i] for i in inputs])

    def _weights(self, pointwise: list[np.ndarray], row: np.ndarray) -> None:
        for p in pointwise:
            if self.shape:  # each involved term's pointwise values have z's shape
                row += np.broadcast_to(p, self.shape).reshape(-1)
            else:
                row[0] += float(np.sum(p))

    @staticmethod
    def _total(weights: np.ndarray) -> tuple[float, np.ndarray]:
        """sum over elements of the log-sum-exp over values; and the softmax weights."""
        weights[~np.isfinite(weights)] = -np.inf
        top = weights.max(axis=0)
        if not np.all(np.isfinite(top)):
            return -np.inf, np.zeros_like(weights)
        shifted = np.exp(weights - top)
        mass = shifted.sum(axis=0)
        return float(np.sum(top + np.log(mass))), shifted / mass

    def value(self, v: list[Any]) -> float:
        lv = list(v)
        size = int(np.prod(self.shape, dtype=int))
        weights = np.zeros((self.support.size, size))
        for k, value in enumerate(self.support):
            self._forward(lv, value)
            pointwise = []
            for term, _ in self.kernels:
                args = {n: lv[j] for n, j in zip(term.argument_names, term.argument_nodes,
                                                  strict=True)}
                pointwise.append(np.asarray(term.distribution.log_density(lv[term.variate], args),
                                            dtype=float))
            self._weights(pointwise, weights[k])
        return self._total(weights)[0]

    def _term_pass(self, term: Any, wrt: frozenset[str], lv: list[Any]
                   ) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        """A term's pointwise values and, for a vector z, the gradients of each element's value
        (arguments broadcast to the elements, so that each element's gradient can be weighed)."""
        d = term.distribution
        args = {n: lv[j] for n, j in zip(term.argument_names, term.argument_nodes, strict=True)}
        x = lv[term.variate]
        if self.shape:
            for name in wrt:
                a = np.asarray(x if name == "x" else args[name], dtype=float)
                ndim = d.event_ndim if name == "x" else d.argument_event_ndim.get(name, 0)
                full = np.array(np.broadcast_to(a, self.shape + a.shape[a.ndim - ndim:]), order="C")
                if name == "x":
                    x = full
                else:
                    args[name] = full
        return d.log_density_and_gradients(x, args, wrt)

    def run(self, v: list[Any], adjoint: list[Any]) -> float:
        lv = list(v)
        size = int(np.prod(self.shape, dtype=int))
        weights = np.zeros((self.support.size, size))
        passes = []
        for k, value in enumerate(self.support):
            self._forward(lv, value)
            saved = {i: lv[i] for i in self.downstream}
            found = [self._term_pass(term, wrt, lv) for term, wrt in self.kernels]
            self._weights([p for p, _ in found], weights[k])
            passes.append((saved, [g for _, g in found]))
        total, probability = self._total(weights)
        if not np.isfinite(total):
            return total
        for k, (saved, gradients) in enumerate(passes):
            for i, value in saved.items():
                lv[i] = value
            weight = probability[k].reshape(self.shape) if self.shape else float(probability[k, 0])
            if not np.any(weight):
                continue  # a value of no weight adds nothing (its gradients may not be finite)
            # the downstream nodes' adjoints are this value's alone; the boundary's add up
            for i in self.downstream:
                adjoint[i] = None

            for (term, wrt), grads in zip(self.kernels, gradients, strict=True):
                d = term.distribution
                named = dict(zip(term.argument_names, term.argument_nodes, strict=True))
                for name in wrt:
                    node = term.variate if name == "x" else named[name]
                    ndim = d.event_ndim if name == "x" else d.argument_event_ndim.get(name, 0)
                    g = np.asarray(grads[name], dtype=float)
                    w = weight if not self.shape else np.reshape(
                        weight, self.shape + (1,) * ndim)
                    # a value with no weight for an element adds nothing there
                    _accumulate(adjoint, node, _unbroadcast(np.where(w != 0, g * w, 0.0),
                                                            np.shape(lv[node])))
            for out, operation, inputs, needs in reversed(self.steps):
                g = adjoint[out]
                if g is None:
                    continue
                grads_in = operation.backward(g, [lv[i] for i in inputs], lv[out], needs)
                for j, need, gj in zip(inputs, needs, grads_in, strict=True):
                    if need and gj is not None:
                        _accumulate(adjoint, j, gj)
        for i in self.downstream:
            adjoint[i] = None
        return total


class Summing:
    """Every summed-out unknown of a model: its kernel for the density plan, the terms left to
    the plan, and its conditional for drawing it per draw."""

    def __init__(self, graph: Graph, slots: list[UnknownSlot], held: list[UnknownSlot],
                 summed: list[UnknownSlot], bounds: dict[str, tuple[int, int]],
                 terms: list[Any], dimension: int, offset: int):
        """``summed``'s slots count from 0; they are placed from ``offset`` (the point size)
        in the extended point that report() fills in."""
        self.slots = [replace(s, start=s.start + offset, stop=s.stop + offset) for s in summed]
        self.offset = offset
        self.size = sum(s.stop - s.start for s in summed)
        problems: list[Problem] = []
        integer_leaves = {s.node: s.name for s in (*held, *self.slots)}
        self.kernels: list[SummedTerms] = []
        involved_all: list[Any] = []
        for slot in self.slots:
            at = pointer("model", "unknowns", slot.name, FLAG)
            downstream = _downstream(graph, slot.node)
            involved = [t for t in terms if _term_nodes(t) & downstream]
            lower, upper = bounds[slot.name]
            for term in involved:
                others = sorted(integer_leaves[j] for j in _upstream(graph, _term_nodes(term))
                                if j in integer_leaves and j != slot.node)
                if others:
                    problems.append(Problem(at, (
                        f"'{slot.name}' shares a term with the integer unknown '{others[0]}', so "
                        "its sum does not stand apart from that unknown's values; sum out "
                        "neither, or write the model so that no term involves both")))
                    break
            outputs = set().union(*(_term_nodes(t) for t in involved)) if involved else set()
            used = downstream & _upstream(graph, outputs)
            self.kernels.append(SummedTerms(graph, slot.node, slot.shape, lower, upper,
                                            involved, used))
            involved_all.extend(involved)
            if upper - lower + 1 > SUMMED_VALUE_LIMIT:
                problems.append(Problem(at, (
                    f"'{slot.name}' has {upper - lower + 1} possible values; summing them out "
                    f"costs that many evaluations of its terms at every gradient, and at most "
                    f"{SUMMED_VALUE_LIMIT} are allowed; leave it to the Gibbs updates instead")))
        self.remaining = [t for t in terms if all(t is not s for s in involved_all)]
        self.conditionals: list[Conditional] = conditionals(graph, slots, self.slots, bounds,
                                                            terms, dimension)
        for slot, conditional in zip(self.slots, self.conditionals, strict=True):
            if not conditional.block.independent:
                problems.append(Problem(pointer("model", "unknowns", slot.name, FLAG), (
                    f"the elements of '{slot.name}' are not conditionally independent given the "
                    "other unknowns (they meet in a sum, a product or a vector argument), so "
                    "summing them out would need a sum over every joint assignment; leave it "
                    "to the Gibbs updates, which draw coupled elements one at a time")))
        if summed and dimension == 0 and not held:
            problems.append(Problem(pointer("model", "unknowns", summed[0].name, FLAG), (
                "with every unknown summed out nothing is left to sample; leave at least one "
                "integer unknown to the Gibbs updates")))
        self.problems = problems

    def extended(self, point: np.ndarray) -> np.ndarray:
        """The point followed by room for the summed-out unknowns' values."""
        out = np.zeros(self.offset + self.size)
        out[:self.offset] = point
        return out

    def draw(self, point: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """The extended point with each summed-out unknown drawn from its full conditional
        given ``point`` (one uniform per element, by inverting the cumulative weights; where no
        value has a finite weight, the lower bound, as the density there is zero anyway)."""
        out = self.extended(point)
        for conditional in self.conditionals:
            b = conditional.block
            weights = conditional.log_weights(out)
            top = weights.max(axis=0)
            finite = np.isfinite(top)
            cumulative = np.cumsum(np.exp(weights - np.where(finite, top, 0.0)), axis=0)
            uniforms = rng.random(b.size) * cumulative[-1]
            chosen = np.minimum(np.count_nonzero(cumulative <= uniforms, axis=0),
                                b.upper - b.lower)
            out[b.start:b.stop] = b.lower + np.where(finite, chosen, 0)
        return out
