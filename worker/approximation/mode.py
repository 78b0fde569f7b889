"""The mode of a log density on the unconstrained scale, by L-BFGS from several starts.

L-BFGS (Liu & Nocedal 1989; scipy.optimize's L-BFGS-B without bounds) with the model's exact
gradients. Several starts guard against a local optimum; the best end point is kept, and every
start that ended elsewhere is reported, since two optima mean a Gaussian at one of them misses mass.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
from scipy import optimize

from worker.samplers.initialisation import InitialisationError, initial_state
from worker.samplers.settings import SamplerSettings


class Target(Protocol):
    dimension: int

    def log_density(self, u: np.ndarray) -> float: ...

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]: ...


# Starts drawn by the chains' starting rule (worker/samplers/initialisation.py, docs/samplers.md:
# normal draws with sd START_SPREAD on the unconstrained scale, narrowing after failures) at the
# chains' default spread, and four of them: our choice, enough to expose a second optimum of a
# bimodal target most of the time at a small cost.
START_SPREAD = SamplerSettings().start_spread
STARTS = 4
# Two end points are the same optimum when their log densities agree to this and their positions
# to POSITION_TOLERANCE * (1 + |u|); our choice, well above what L-BFGS leaves at convergence.
DENSITY_TOLERANCE = 1e-4
POSITION_TOLERANCE = 1e-3


@dataclass(frozen=True)
class OptimumRun:
    start: np.ndarray
    end: np.ndarray
    log_density: float
    converged: bool
    message: str
    gradient_calls: int


@dataclass(frozen=True)
class ModeSearch:
    mode: np.ndarray
    log_density: float
    runs: list[OptimumRun]
    disagreements: list[str] = field(default_factory=list)


class ModeNotFound(ValueError):
    """No start reached a finite optimum; .reason is one plain sentence."""

    def __init__(self, reason: str):
        super().__init__(reason)
        self.reason = reason


def _start(target: Target, rng: np.random.Generator, spread: float) -> np.ndarray | None:
    # The gradient must be finite too: L-BFGS needs it from the first step.
    try:
        return initial_state(target, "random", spread, rng, None, needs_gradient=True).position
    except InitialisationError:
        return None


def find_mode(target: Target, rng: np.random.Generator, starts: int = STARTS,
              spread: float = START_SPREAD) -> ModeSearch:
    """Maximise target.log_density from `starts` random starts; raises ModeNotFound."""

    def negative(u: np.ndarray) -> tuple[float, np.ndarray]:
        value, gradient = target.log_density_and_gradient(u)
        if not np.isfinite(value):
            # L-BFGS's line search backs off from an infinite value: a zero-density point is
            # simply a step too far.
            return np.inf, np.zeros_like(u)
        return -value, -gradient

    runs: list[OptimumRun] = []
    for _ in range(starts):
        u0 = _start(target, rng, spread)
        if u0 is None:
            continue
        # gtol/ftol far below defaults: the Hessian is taken at this point, so it must be a
        # stationary point to rounding, not merely a good value; our choice.
        result = optimize.minimize(negative, u0, jac=True, method="L-BFGS-B",
                                   options={"maxiter": 20_000, "gtol": 1e-10, "ftol": 1e-15})
        runs.append(OptimumRun(u0, np.asarray(result.x, dtype=float), float(-result.fun),
                               bool(result.success), str(result.message), int(result.nfev)))
    finite = [r for r in runs if np.isfinite(r.log_density)]
    if not finite:
        raise ModeNotFound("no start with a finite log density led to an optimum; check that "
                           "the model's density is finite somewhere near zero on the "
                           "unconstrained scale")
    best = max(finite, key=lambda r: r.log_density)
    disagreements = []
    for k, run in enumerate(runs):
        if run is best:
            continue
        far = np.max(np.abs(run.end - best.end) / (1.0 + np.abs(best.end)), initial=0.0)
        if best.log_density - run.log_density > DENSITY_TOLERANCE or far > POSITION_TOLERANCE:
            disagreements.append(
                f"start {k + 1} ended at log density {run.log_density:.6g}, "
                f"{best.log_density - run.log_density:.3g} below the best, at a point up to "
                f"{far:.3g} (relative) away: the density may have more than one mode")
    return ModeSearch(best.end, best.log_density, runs, disagreements)
