"""One static HMC transition: a fixed integration time, leapfrog, Metropolis correction.

Neal (2011), MCMC using Hamiltonian dynamics, Handbook of Markov Chain Monte Carlo ch. 5,
section 5.3.2 (the algorithm) and section 5.4.2.2 (randomising the step size to avoid the
near-periodic trajectories a fixed number of steps can produce).
"""

from __future__ import annotations

import math

import numpy as np

from worker.samplers.hamiltonian import Metric, State, finite, hamiltonian
from worker.samplers.target import Target

JITTER = 0.1  # step size drawn uniformly from [0.9, 1.1] x the adapted one when jitter is on


class StaticHmcTransition:
    """Draw the next state with ceil(integration_time / step) leapfrog steps.

    The number of steps is capped at ``max_steps`` (2 ** maximum_tree_depth, the budget NUTS has),
    so a tiny adapted step size cannot make one iteration run for ever.
    """

    def __init__(
        self,
        target: Target,
        metric: Metric,
        step_size: float,
        integration_time: float,
        jitter: bool,
        max_steps: int,
        divergence_threshold: float,
    ):
        self.target = target
        self.metric = metric
        self.step_size = step_size
        self.integration_time = integration_time
        self.jitter = jitter
        self.max_steps = max_steps
        self.divergence_threshold = divergence_threshold

    def __call__(self, state: State, rng: np.random.Generator) -> tuple[State, dict[str, float]]:
        eps = self.step_size
        if self.jitter:
            eps *= rng.uniform(1.0 - JITTER, 1.0 + JITTER)
        steps = min(self.max_steps, max(1, math.ceil(self.integration_time / eps)))
        metric = self.metric
        momentum = metric.draw_momentum(rng)
        h0 = hamiltonian(state.log_density, momentum, metric)
        velocity = metric.velocity
        target = self.target
        q, p, g = state.position, momentum, state.gradient
        log_density = state.log_density
        # leapfrog() and hamiltonian() written out for the loop: (eps/2) * gradient is formed
        # once per step and used by both half steps it belongs to, the half-step momentum goes
        # into a preallocated buffer, and the kinetic energy is the same dot product. The
        # numbers are those of the two functions (tests/samplers/test_pinned_draws.py).
        half_eps = 0.5 * eps
        half_g = half_eps * g
        half = np.empty_like(p)
        divergent = False
        taken = 0
        for _ in range(steps):
            np.add(p, half_g, out=half)
            q = q + eps * velocity(half)
            taken += 1
            log_density = -math.inf
            if finite(q):
                try:
                    log_density, g = target.log_density_and_gradient(q)
                except ArithmeticError:
                    log_density = -math.inf
                else:
                    log_density = float(log_density)
                    g = np.asarray(g, dtype=np.float64)
            if not (math.isfinite(log_density) and finite(g)):
                divergent = True
                break
            half_g = half_eps * g
            p = half + half_g
            h = -log_density + 0.5 * float(p.dot(velocity(p)))
            if not math.isfinite(h) or h - h0 > self.divergence_threshold:
                divergent = True
                break
        if divergent:
            acceptance = 0.0
        else:
            error = h - h0
            acceptance = 1.0 if error <= 0 else math.exp(-error)
        if not divergent and rng.random() < acceptance:
            new_state, energy = State(q, log_density, g), h
        else:
            new_state, energy = state, h0
        stats = {
            "step_size": eps,
            "gradient_calls": float(taken),
            "accept_probability": acceptance,
            "energy": energy,
            "divergent": float(divergent),
            "log_density": new_state.log_density,
        }
        return new_state, stats
