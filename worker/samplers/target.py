"""The Target protocol the samplers draw from, and a guarded way to evaluate it."""

from __future__ import annotations

import math
from typing import Protocol

import numpy as np


class Target(Protocol):
    """A log density on R^dimension (unconstrained space), up to an additive constant."""

    dimension: int

    def log_density(self, u: np.ndarray) -> float: ...

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]: ...


def all_finite(x: np.ndarray) -> bool:
    """True when every entry is finite (a sum is NaN or inf otherwise; far cheaper than isfinite).

    A sum of finite entries can itself overflow, so entries near 1e308 also count as not
    finite, which is harmless for positions and gradients a sampler can use.
    """
    return math.isfinite(x.sum())


def density_and_gradient(target: Target, u: np.ndarray) -> tuple[float, np.ndarray]:
    """Evaluate the target; any non-finite value or arithmetic failure becomes log density -inf.

    Samplers treat -inf as "outside the support": a leapfrog step that lands there is a divergence
    and a Metropolis proposal there is rejected, so a badly behaved model ends in reported
    divergences rather than a crash or NaN draws. Callers silence numpy's floating-point warnings
    (np.errstate) around whole transitions rather than per evaluation, which is costly.
    """
    if not all_finite(u):
        return -math.inf, np.zeros_like(u)
    try:
        value, gradient = target.log_density_and_gradient(u)
    except ArithmeticError:
        return -math.inf, np.zeros_like(u)
    value = float(value)
    gradient = np.asarray(gradient, dtype=np.float64)
    if not math.isfinite(value) or not all_finite(gradient):
        return -math.inf, np.zeros_like(u)
    return value, gradient


def density_only(target: Target, u: np.ndarray) -> float:
    """Evaluate the log density alone (random-walk Metropolis needs no gradient)."""
    if not all_finite(u):
        return -math.inf
    try:
        value = float(target.log_density(u))
    except ArithmeticError:
        return -math.inf
    return value if math.isfinite(value) else -math.inf


class CountedTarget:
    """A Target that counts the calls a chain makes into the model.

    ``gradient_evaluations`` counts evaluations of the log density with its gradient (one per
    leapfrog step, initialisation attempt, optimiser call or step-size trial);
    ``log_density_evaluations`` counts evaluations of the log density alone (random-walk
    Metropolis, warm-start position checks). A call counts when it is made, also when the model
    then fails, since the work was done. The cost is one integer increment per call.
    """

    __slots__ = ("inner", "dimension", "gradient_evaluations", "log_density_evaluations")

    def __init__(self, inner: Target):
        self.inner = inner
        self.dimension = inner.dimension
        self.gradient_evaluations = 0
        self.log_density_evaluations = 0

    def log_density(self, u: np.ndarray) -> float:
        self.log_density_evaluations += 1
        return self.inner.log_density(u)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        self.gradient_evaluations += 1
        return self.inner.log_density_and_gradient(u)
