"""One NUTS transition: tree doubling with multinomial sampling and the generalized no-U-turn rule.

Hoffman & Gelman (2014), The No-U-Turn Sampler, JMLR 15, sections 3.1 and 3.2 (tree doubling to a
maximum depth; divergence when the energy error is too large), with the refinements of Betancourt
(2017), A conceptual introduction to Hamiltonian Monte Carlo, arXiv:1701.02434, appendix A:

- each point on the trajectory is weighted by exp(-H); within a subtree the sample is chosen in
  proportion to these weights (uniform progressive sampling), and when a new subtree is joined to
  the trajectory at the top level its sample replaces the current one with probability
  min(1, w_new / w_old) (biased progressive sampling, which favours points far from the start);
- the trajectory stops when the generalized criterion fails on the summed momentum rho of a
  (sub)tree: it continues only while p#_minus . rho > 0 and p#_plus . rho > 0, where p# = M^-1 p at
  the two ends. When two subtrees are merged we also test the tree formed by the left subtree plus
  the first point of the right one, and the last point of the left plus the right subtree, which
  catches U-turns that straddle the boundary between the halves.
"""

from __future__ import annotations

import math

import numpy as np

from worker.samplers.hamiltonian import Metric, State, hamiltonian, leapfrog
from worker.samplers.target import Target


class _Tree:
    """A contiguous stretch of trajectory: its two ends, momentum sum, weight and chosen sample."""

    __slots__ = (
        "q_minus", "p_minus", "g_minus", "v_minus",
        "q_plus", "p_plus", "g_plus", "v_plus",
        "rho", "log_weight", "sample", "sample_energy",
        "accept_sum", "steps", "valid", "divergent",
    )  # fmt: skip

    def __init__(
        self,
        q: np.ndarray,
        p: np.ndarray,
        g: np.ndarray,
        v: np.ndarray,
        log_weight: float,
        sample: State,
        energy: float,
    ):
        self.q_minus = self.q_plus = q
        self.p_minus = self.p_plus = p
        self.g_minus = self.g_plus = g
        self.v_minus = self.v_plus = v
        self.rho = p
        self.log_weight = log_weight
        self.sample = sample
        self.sample_energy = energy
        self.accept_sum = 0.0
        self.steps = 0
        self.valid = True
        self.divergent = False


def log_add(a: float, b: float) -> float:
    """log(e^a + e^b) for finite a, b, without overflow."""
    if a < b:
        a, b = b, a
    return a + math.log1p(math.exp(b - a))


def _continues(v_minus: np.ndarray, v_plus: np.ndarray, rho: np.ndarray) -> bool:
    """The generalized no-U-turn criterion (Betancourt 2017, section A.4.2)."""
    return bool(v_minus.dot(rho) > 0.0) and bool(v_plus.dot(rho) > 0.0)


def _join(left: _Tree, right: _Tree) -> bool:
    """Store the span of left+right in ``left``'s ends; return True when the joined tree turns.

    Both the whole-tree check and the two checks across the boundary are made here.
    """
    rho = left.rho + right.rho
    turning = not _continues(left.v_minus, right.v_plus, rho)
    if not turning:
        rho_left = left.rho + right.p_minus
        turning = not _continues(left.v_minus, right.v_minus, rho_left)
    if not turning:
        rho_right = left.p_plus + right.rho
        turning = not _continues(left.v_plus, right.v_plus, rho_right)
    left.q_plus, left.p_plus, left.g_plus, left.v_plus = (
        right.q_plus, right.p_plus, right.g_plus, right.v_plus,
    )  # fmt: skip
    left.rho = rho
    return turning


class NutsTransition:
    """Draw the next state of a NUTS chain for a fixed step size and metric."""

    def __init__(
        self,
        target: Target,
        metric: Metric,
        step_size: float,
        maximum_tree_depth: int,
        divergence_threshold: float,
    ):
        self.target = target
        self.metric = metric
        self.step_size = step_size
        self.maximum_tree_depth = maximum_tree_depth
        self.divergence_threshold = divergence_threshold

    def __call__(self, state: State, rng: np.random.Generator) -> tuple[State, dict[str, float]]:
        metric = self.metric
        p0 = metric.draw_momentum(rng)
        h0 = hamiltonian(state.log_density, p0, metric)
        tree = _Tree(state.position, p0, state.gradient, metric.velocity(p0), 0.0, state, h0)
        accept_sum = 0.0
        steps = 0
        depth = 0
        divergent = False
        while depth < self.maximum_tree_depth:
            forward = rng.random() < 0.5
            if forward:
                new = self._build(tree.q_plus, tree.p_plus, tree.g_plus, 1.0, depth, h0, rng)
            else:
                new = self._build(tree.q_minus, tree.p_minus, tree.g_minus, -1.0, depth, h0, rng)
            depth += 1
            accept_sum += new.accept_sum
            steps += new.steps
            if not new.valid:
                divergent = new.divergent
                break
            # Biased progressive sampling: move to the new subtree's sample with prob w_new/w_old.
            if math.log(rng.random()) < new.log_weight - tree.log_weight:
                tree.sample, tree.sample_energy = new.sample, new.sample_energy
            tree.log_weight = log_add(tree.log_weight, new.log_weight)
            if forward:
                turning = _join(tree, new)
            else:
                turning = _join(new, tree)
                tree.q_minus, tree.p_minus, tree.g_minus, tree.v_minus = (
                    new.q_minus, new.p_minus, new.g_minus, new.v_minus,
                )  # fmt: skip
                tree.q_plus, tree.p_plus, tree.g_plus, tree.v_plus = (
                    new.q_plus, new.p_plus, new.g_plus, new.v_plus,
                )  # fmt: skip
                tree.rho = new.rho
            if turning:
                break
        stats = {
            "step_size": self.step_size,
            "doublings": float(depth),
            "gradient_calls": float(steps),
            "accept_probability": accept_sum / steps,
            "energy": tree.sample_energy,
            "divergent": float(divergent),
            "log_density": tree.sample.log_density,
        }
        return tree.sample, stats

    def _build(
        self,
        q: np.ndarray,
        p: np.ndarray,
        g: np.ndarray,
        direction: float,
        depth: int,
        h0: float,
        rng: np.random.Generator,
    ) -> _Tree:
        """A subtree of 2**depth leapfrog steps from the edge (q, p, g), going ``direction``."""
        if depth == 0:
            return self._one_step(q, p, g, direction, h0)
        inner = self._build(q, p, g, direction, depth - 1, h0, rng)
        if not inner.valid:
            return inner
        if direction > 0:
            outer = self._build(inner.q_plus, inner.p_plus, inner.g_plus, direction, depth - 1,
                                h0, rng)  # fmt: skip
        else:
            outer = self._build(inner.q_minus, inner.p_minus, inner.g_minus, direction,
                                depth - 1, h0, rng)  # fmt: skip
        inner.accept_sum += outer.accept_sum
        inner.steps += outer.steps
        if not outer.valid:
            inner.valid = False
            inner.divergent = outer.divergent
            return inner
        total = log_add(inner.log_weight, outer.log_weight)
        # Uniform progressive sampling within a subtree: each point in proportion to its weight.
        if math.log(rng.random()) < outer.log_weight - total:
            inner.sample, inner.sample_energy = outer.sample, outer.sample_energy
        inner.log_weight = total
        if direction > 0:
            inner.valid = not _join(inner, outer)
            return inner
        outer.sample, outer.sample_energy = inner.sample, inner.sample_energy
        outer.log_weight = total
        outer.accept_sum, outer.steps = inner.accept_sum, inner.steps
        outer.valid = not _join(outer, inner)
        return outer

    def _one_step(
        self, q: np.ndarray, p: np.ndarray, g: np.ndarray, direction: float, h0: float
    ) -> _Tree:
        q1, p1, log_density, g1 = leapfrog(
            self.target, self.metric, q, p, g, direction * self.step_size
        )
        h1 = hamiltonian(log_density, p1, self.metric)
        error = h1 - h0
        v1 = self.metric.velocity(p1) if math.isfinite(h1) else np.zeros_like(p1)
        tree = _Tree(q1, p1, g1, v1, -error, State(q1, log_density, g1), h1)
        tree.steps = 1
        if not math.isfinite(error) or error > self.divergence_threshold:
            tree.valid = False
            tree.divergent = True
            tree.accept_sum = 0.0
        else:
            tree.accept_sum = 1.0 if error <= 0 else math.exp(-error)
        return tree
