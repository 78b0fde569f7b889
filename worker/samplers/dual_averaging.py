"""Step-size adaptation by dual averaging, and the initial step-size heuristic.

Hoffman & Gelman (2014), The No-U-Turn Sampler, JMLR 15, section 3.2 (after Nesterov 2009,
Primal-dual subgradient methods for convex problems): with H_t = delta - alpha_t,

    Hbar_t = (1 - 1/(t + t0)) Hbar_{t-1} + H_t / (t + t0)
    log eps_t = mu - sqrt(t) / gamma * Hbar_t
    log epsbar_t = t^-kappa log eps_t + (1 - t^-kappa) log epsbar_{t-1}

with gamma = 0.05, t0 = 10, kappa = 0.75 and mu = log(10 eps_0), the values recommended there.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from worker.samplers.hamiltonian import Metric, State, hamiltonian, leapfrog
from worker.samplers.target import Target

GAMMA = 0.05
T0 = 10.0
KAPPA = 0.75
# Step sizes are kept within [1e-8, 1e8] (in units of the metric). Below the floor a step no
# longer moves a position of order one in double precision, so a target on which every step
# fails would otherwise shrink the step until trajectories stand still and never turn.
MIN_LOG_STEP = math.log(1e-8)
MAX_LOG_STEP = math.log(1e8)


def clamp_log_step(log_step: float) -> float:
    return min(max(log_step, MIN_LOG_STEP), MAX_LOG_STEP)


@dataclass
class DualAveraging:
    """The running state of one dual-averaging sequence (JSON-able through ``as_dict``)."""

    target: float
    mu: float
    iteration: int = 0
    mean_error: float = 0.0
    log_step: float = 0.0
    log_step_average: float = 0.0

    @classmethod
    def start(cls, step_size: float, target: float) -> DualAveraging:
        return cls(target=target, mu=math.log(10.0 * step_size), log_step=math.log(step_size))

    def update(self, acceptance: float) -> float:
        """Feed one iteration's acceptance statistic; return the step size for the next one."""
        self.iteration += 1
        t = self.iteration
        weight = 1.0 / (t + T0)
        self.mean_error = (1.0 - weight) * self.mean_error + weight * (self.target - acceptance)
        self.log_step = clamp_log_step(self.mu - math.sqrt(t) / GAMMA * self.mean_error)
        eta = t**-KAPPA
        self.log_step_average = eta * self.log_step + (1.0 - eta) * self.log_step_average
        return math.exp(self.log_step)

    def final_step_size(self) -> float:
        """The averaged iterate, used once adaptation stops."""
        if self.iteration == 0:
            return math.exp(self.log_step)
        return math.exp(self.log_step_average)

    def as_dict(self) -> dict:
        return asdict(self)


MAX_HEURISTIC_ROUNDS = 100


def initial_step_size(
    target: Target,
    metric: Metric,
    state: State,
    step_size: float,
    rng: np.random.Generator,
) -> float:
    """A reasonable first step size (Hoffman & Gelman 2014, Algorithm 4).

    Doubles or halves the step until the acceptance probability of a single leapfrog step crosses
    1/2. Bounded to a fixed number of rounds so a target that is nowhere well behaved ends with a
    tiny or huge step size (and then divergences) instead of an endless loop.
    """
    momentum = metric.draw_momentum(rng)
    h0 = hamiltonian(state.log_density, momentum, metric)

    def log_acceptance(eps: float) -> float:
        _, p1, log_density, _ = leapfrog(
            target, metric, state.position, momentum, state.gradient, eps
        )
        h1 = hamiltonian(log_density, p1, metric)
        return h0 - h1 if math.isfinite(h1) else -math.inf

    eps = step_size
    direction = 1.0 if log_acceptance(eps) > math.log(0.5) else -1.0
    for _ in range(MAX_HEURISTIC_ROUNDS):
        if direction * log_acceptance(eps) <= -direction * math.log(2.0):
            break
        next_eps = math.exp(clamp_log_step(math.log(eps) + direction * math.log(2.0)))
        if next_eps == eps:
            break
        eps = next_eps
    return eps
