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

How the loop is written (issue 18 item 4: the sampler's own work per leapfrog step):

- A subtree of depth j is built leaf by leaf rather than by recursion. Its leaves come in the order
  the recursion visits them, and after leaf k the merges the recursion would make next are those
  of the trailing one bits of k, lowest level first; completed halves wait in per-level slots. So
  every random number is drawn, every sum is formed and every dot product is taken exactly as the
  recursive description says, in the same order, and the draws are bitwise those of the recursive
  form (tests/samplers/test_pinned_draws.py pins them).
- A subtree is described by its build order: "first" is its point next to where it was started
  from, "last" its far end. Merging an earlier subtree E with a later one L then reads the same in
  both directions: rho = rho_E + rho_L, checked at first_E and last_L; rho_E + p_first_L, checked at
  first_E and first_L; p_last_E + rho_L, checked at last_E and last_L. When E and L are single
  points the three sums are the same vector and the three checks the same, so only one is made.
- Each point keeps (step/2) * gradient, which the next leapfrog step from it in the same direction
  would compute again; the velocity M^-1 p of a point is computed once, for its kinetic energy, and
  reused by the U-turn checks; the half-step momentum and the position increment are written into
  two buffers the metric keeps (Metric.workspace, built once per step size rather than once per
  transition, since the chain builds a transition per iteration). A diagonal metric of ones
  multiplies by nothing (x * 1.0 == x exactly).
- Positions and gradients are checked finite by worker.samplers.hamiltonian.finite (written out
  here): the answer of worker.samplers.target.all_finite for the price of one dot product.
"""

from __future__ import annotations

import math

import numpy as np

from worker.samplers.hamiltonian import Metric, State
from worker.samplers.target import Target, all_finite


def log_add(a: float, b: float) -> float:
    """log(e^a + e^b) for finite a, b, without overflow."""
    if a < b:
        a, b = b, a
    return a + math.log1p(math.exp(b - a))


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
        inverse = metric.inverse
        self._full = inverse if metric.kind == "full" else None
        self._diagonal = None if metric.kind == "full" or metric.unit else inverse
        self._workspace = metric.workspace(step_size)
        # Per level of a subtree: the completed earlier half waiting for its sibling.
        self._waiting: list[tuple] = [()] * maximum_tree_depth

    def _velocity(self, p: np.ndarray) -> np.ndarray:
        if self._full is not None:
            return self._full @ p
        if self._diagonal is not None:
            return self._diagonal * p
        return p

    def __call__(self, state: State, rng: np.random.Generator) -> tuple[State, dict[str, float]]:
        metric = self.metric
        p0 = metric.draw_momentum(rng)
        v0 = self._velocity(p0)
        # hamiltonian(state.log_density, p0, metric), reusing the velocity
        h0 = -state.log_density + 0.5 * float(p0.dot(v0))
        if not math.isfinite(h0):
            h0 = math.inf
        # The two ends of the trajectory: position, momentum, gradient, velocity and the
        # (step/2) * gradient of a step leaving the trajectory from that end (None until needed).
        q0, g0 = state.position, state.gradient
        minus = (q0, p0, g0, v0, None)
        plus = minus
        rho = p0
        log_weight = 0.0
        sample_q, sample_log_density, sample_g = q0, state.log_density, g0
        sample_energy = h0
        accept_sum = 0.0
        steps = 0
        depth = 0
        divergent = False
        eps = self.step_size
        while depth < self.maximum_tree_depth:
            forward = rng.random() < 0.5
            step = eps if forward else -eps
            q, p, g, _, half_g = plus if forward else minus
            if half_g is None:
                half_g = (0.5 * step) * g
            new = self._subtree(q, p, g, half_g, step, depth, h0, rng)
            depth += 1
            (valid, new_divergent, new_accept, new_steps, new_log_weight, new_q, new_log_density,
             new_g, new_energy, first_p, first_v, last, new_rho) = new  # fmt: skip
            accept_sum += new_accept
            steps += new_steps
            if not valid:
                divergent = new_divergent
                break
            # Biased progressive sampling: move to the new subtree's sample with prob w_new/w_old.
            if math.log(rng.random()) < new_log_weight - log_weight:
                sample_q, sample_log_density, sample_g = new_q, new_log_density, new_g
                sample_energy = new_energy
            log_weight = log_add(log_weight, new_log_weight)
            # The trajectory so far is the earlier tree; its end next to the new subtree is the
            # end the new subtree was started from.
            near, far = (plus, minus) if forward else (minus, plus)
            turning, rho = _merge_turns(
                rho, far[3], near[1], near[3], new_rho, first_p, first_v, last[1], last[3],
                depth == 1,
            )  # fmt: skip
            if forward:
                plus = last
            else:
                minus = last
            if turning:
                break
        stats = {
            "step_size": self.step_size,
            "doublings": float(depth),
            "gradient_calls": float(steps),
            "accept_probability": accept_sum / steps,
            "energy": sample_energy,
            "divergent": float(divergent),
            "log_density": sample_log_density,
        }
        if sample_q is q0:  # the chain stays where it was
            return state, stats
        return State(sample_q, sample_log_density, sample_g), stats

    def _subtree(
        self,
        q: np.ndarray,
        p: np.ndarray,
        g: np.ndarray,
        half_g: np.ndarray,
        step: float,
        depth: int,
        h0: float,
        rng: np.random.Generator,
    ) -> tuple:
        """A subtree of 2**depth leapfrog steps of signed size ``step`` from the edge (q, p, g).

        Returns (valid, divergent, accept_sum, steps, log_weight, sample position, sample log
        density, sample gradient, sample energy, first momentum, first velocity, last point as
        (q, p, g, velocity, (step/2) * gradient), rho).
        """
        target = self.target
        full, diagonal = self._full, self._diagonal
        space = self._workspace
        half, move = space.half, space.move
        threshold = self.divergence_threshold
        waiting = self._waiting
        add, multiply, random = np.add, np.multiply, rng.random
        log, log1p, exp, isfinite, inf = math.log, math.log1p, math.exp, math.isfinite, math.inf
        steps, half_steps = space.forward if step > 0 else space.backward
        for k in range(1 << depth):
            # One leapfrog step (Neal 2011, eq. 5.18-5.20), with its log density, gradient and
            # energy checked as worker.samplers.target.density_and_gradient and
            # worker.samplers.hamiltonian.hamiltonian do.
            add(p, half_g, out=half)
            if full is not None:
                np.matmul(full, half, out=move)
                multiply(steps, move, out=move)
            elif diagonal is not None:
                multiply(diagonal, half, out=move)
                multiply(steps, move, out=move)
            else:
                multiply(steps, half, out=move)
            q = add(q, move)
            h1 = inf
            if q.dot(q) < inf or all_finite(q):  # finite(q), written out
                try:
                    log_density, g = target.log_density_and_gradient(q)
                except ArithmeticError:
                    log_density = -inf
                else:
                    log_density = float(log_density)
                    g = np.asarray(g, dtype=np.float64)
                if isfinite(log_density) and (g.dot(g) < inf or all_finite(g)):  # finite(g)
                    half_g = multiply(half_steps, g)
                    p = add(half, half_g)
                    if full is not None:
                        v = full @ p
                    elif diagonal is not None:
                        v = multiply(diagonal, p)
                    else:
                        v = p
                    h1 = -log_density + 0.5 * float(p.dot(v))
                    if not isfinite(h1):
                        h1 = inf
            error = h1 - h0
            if not error <= threshold:  # also when error is NaN or infinite
                return self._ended(k, depth, 0.0, True, 0)
            accept = 1.0 if error <= 0 else exp(-error)
            # The leaf as a one-point subtree; then the merges the recursion makes after it.
            log_weight = -error
            sample_q, sample_log_density, sample_g, sample_energy = q, log_density, g, h1
            first_p, first_v, rho = p, v, p
            level = 0
            while (k >> level) & 1:
                (earlier_accept, earlier_log_weight, earlier_q, earlier_log_density, earlier_g,
                 earlier_energy, earlier_first_p, earlier_first_v, earlier_last_p, earlier_last_v,
                 earlier_rho) = waiting[level]  # fmt: skip
                accept = earlier_accept + accept
                # log_add(earlier_log_weight, log_weight), written out
                if earlier_log_weight < log_weight:
                    total = log_weight + log1p(exp(earlier_log_weight - log_weight))
                else:
                    total = earlier_log_weight + log1p(exp(log_weight - earlier_log_weight))
                # Uniform progressive sampling within a subtree: each point in proportion to its
                # weight; the later half's sample is kept with probability w_later / w_total.
                if not log(random()) < log_weight - total:
                    sample_q, sample_g = earlier_q, earlier_g
                    sample_log_density, sample_energy = earlier_log_density, earlier_energy
                log_weight = total
                # The generalized criterion on the merged tree, then (unless both halves are
                # single points, where these are the same check) across the boundary.
                later_rho = rho
                rho = add(earlier_rho, later_rho)
                turning = not (earlier_first_v.dot(rho) > 0.0 and v.dot(rho) > 0.0)
                if not turning and level:
                    across = add(earlier_rho, first_p)
                    turning = not (earlier_first_v.dot(across) > 0.0
                                   and first_v.dot(across) > 0.0)
                    if not turning:
                        across = add(earlier_last_p, later_rho)
                        turning = not (earlier_last_v.dot(across) > 0.0 and v.dot(across) > 0.0)
                first_p, first_v = earlier_first_p, earlier_first_v
                level += 1
                if turning:
                    return self._ended(k, depth, accept, False, level)
            if level < depth:
                waiting[level] = (
                    accept, log_weight, sample_q, sample_log_density, sample_g, sample_energy,
                    first_p, first_v, p, v, rho,
                )  # fmt: skip
        return (True, False, accept, 1 << depth, log_weight, sample_q, sample_log_density,
                sample_g, sample_energy, first_p, first_v, (q, p, g, v, half_g), rho)  # fmt: skip

    def _ended(self, k: int, depth: int, accept: float, divergent: bool, level: int) -> tuple:
        """The invalid subtree when leaf k diverged (level 0) or a merge up to ``level`` turned.

        Its acceptance statistics are summed as the recursion returns: each waiting earlier half
        above ``level`` that the ended part is the later sibling of adds its own.
        """
        for above in range(level, depth):
            if (k >> above) & 1:
                accept = self._waiting[above][0] + accept
        return (False, divergent, accept, k + 1, 0.0, None, 0.0, None, 0.0, None, None, None,
                None)  # fmt: skip


def _merge_turns(
    earlier_rho: np.ndarray,
    earlier_first_v: np.ndarray,
    earlier_last_p: np.ndarray,
    earlier_last_v: np.ndarray,
    later_rho: np.ndarray,
    later_first_p: np.ndarray,
    later_first_v: np.ndarray,
    later_last_p: np.ndarray,
    later_last_v: np.ndarray,
    single_points: bool,
) -> tuple[bool, np.ndarray]:
    """(True when the merged tree turns, its rho): the generalized criterion (Betancourt 2017,
    section A.4.2) on the whole tree, then on the two trees straddling the boundary."""
    rho = earlier_rho + later_rho
    if not (earlier_first_v.dot(rho) > 0.0 and later_last_v.dot(rho) > 0.0):
        return True, rho
    if single_points:
        return False, rho
    across = earlier_rho + later_first_p
    if not (earlier_first_v.dot(across) > 0.0 and later_first_v.dot(across) > 0.0):
        return True, rho
    across = earlier_last_p + later_rho
    if not (earlier_last_v.dot(across) > 0.0 and later_last_v.dot(across) > 0.0):
        return True, rho
    return False, rho
