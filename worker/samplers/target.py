"""The Target protocol the samplers draw from, and a guarded way to evaluate it."""

from __future__ import annotations

from typing import Protocol

import numpy as np


class Target(Protocol):
    """A log density on R^dimension (unconstrained space), up to an additive constant."""

    dimension: int

    def log_density(self, u: np.ndarray) -> float: ...

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]: ...


def density_and_gradient(target: Target, u: np.ndarray) -> tuple[float, np.ndarray]:
    """Evaluate the target; any non-finite value or arithmetic failure becomes log density -inf.

    Samplers treat -inf as "outside the support": a leapfrog step that lands there is a divergence
    and a Metropolis proposal there is rejected, so a badly behaved model ends in reported
    divergences rather than a crash or NaN draws.
    """
    if not np.all(np.isfinite(u)):
        return -np.inf, np.zeros_like(u)
    try:
        with np.errstate(all="ignore"):
            value, gradient = target.log_density_and_gradient(u)
    except ArithmeticError:
        return -np.inf, np.zeros_like(u)
    value = float(value)
    gradient = np.asarray(gradient, dtype=np.float64)
    if not np.isfinite(value) or not np.all(np.isfinite(gradient)):
        return -np.inf, np.zeros_like(u)
    return value, gradient


def density_only(target: Target, u: np.ndarray) -> float:
    """Evaluate the log density alone (random-walk Metropolis needs no gradient)."""
    if not np.all(np.isfinite(u)):
        return -np.inf
    try:
        with np.errstate(all="ignore"):
            value = float(target.log_density(u))
    except ArithmeticError:
        return -np.inf
    return value if np.isfinite(value) else -np.inf
