"""Euclidean Hamiltonian dynamics: the metric (mass matrix) and the leapfrog integrator.

Following Neal (2011), MCMC using Hamiltonian dynamics, section 5.2-5.4: the Hamiltonian is
H(q, p) = -log pi(q) + p' M^-1 p / 2 with momentum p ~ N(0, M). We store the inverse metric M^-1,
which is what adaptation estimates (the posterior covariance, or its diagonal).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from worker.samplers.target import Target, all_finite, density_and_gradient


class Metric:
    """The inverse metric M^-1 for a preconditioning kind: identity ("none"), a vector of
    variances ("per_coordinate") or a covariance matrix ("full")."""

    def __init__(self, kind: str, inverse: np.ndarray):
        self.kind = kind
        self.inverse = np.array(inverse, dtype=np.float64)
        if kind == "full":
            # M^-1 = L L'; momentum p = L'^-1 z then has covariance (L L')^-1 = M.
            self._cholesky = np.linalg.cholesky(self.inverse)
        else:
            self._sd = np.sqrt(self.inverse)
        # A diagonal of ones: M^-1 p is p itself (p * 1.0 == p exactly), so loops may skip it.
        self.unit = kind != "full" and bool(np.all(self.inverse == 1.0))
        self._workspace: Workspace | None = None

    def workspace(self, step_size: float) -> Workspace:
        """Scratch buffers and step-size vectors for loops at ``step_size``, kept while it stays
        (a transition is built per iteration, and sampling keeps one step size throughout)."""
        space = self._workspace
        if space is None or space.step_size != step_size:
            space = self._workspace = Workspace.build(self.inverse.shape[0], step_size)
        return space

    @classmethod
    def identity(cls, kind: str, dimension: int) -> Metric:
        if kind == "full":
            return cls(kind, np.eye(dimension))
        return cls(kind, np.ones(dimension))

    def velocity(self, p: np.ndarray) -> np.ndarray:
        """dq/dt = M^-1 p."""
        if self.kind == "full":
            return self.inverse @ p
        return self.inverse * p

    def kinetic(self, p: np.ndarray) -> float:
        return 0.5 * float(p @ self.velocity(p))

    def draw_momentum(self, rng: np.random.Generator) -> np.ndarray:
        z = rng.standard_normal(self.inverse.shape[0])
        if self.kind == "full":
            # z comes from the generator, so it is finite and the check would be wasted.
            return scipy.linalg.solve_triangular(
                self._cholesky, z, lower=True, trans="T", check_finite=False
            )
        return z / self._sd

    def as_json(self) -> dict:
        """The warm-start record's preconditioning: a full covariance, or per-coordinate scales
        (standard deviations, the square roots of the variances; all ones for "none")."""
        if self.kind == "full":
            return {"preconditioning": self.kind, "covariance": self.inverse.tolist()}
        return {"preconditioning": self.kind, "scales": self._sd.tolist()}


@dataclass(slots=True)
class Workspace:
    """Preallocated arrays for a leapfrog loop at one step size.

    Multiplying by a vector of copies of a scalar gives the same numbers as multiplying by the
    scalar, without numpy converting the Python float on every call.
    """

    step_size: float
    half: np.ndarray  # momentum after the first half step
    move: np.ndarray  # step * M^-1 (half-step momentum)
    forward: tuple[np.ndarray, np.ndarray]  # (step, step / 2) as vectors
    backward: tuple[np.ndarray, np.ndarray]  # (-step, -step / 2)

    @classmethod
    def build(cls, dimension: int, step_size: float) -> Workspace:
        return cls(
            step_size,
            np.empty(dimension),
            np.empty(dimension),
            (np.full(dimension, step_size), np.full(dimension, 0.5 * step_size)),
            (np.full(dimension, -step_size), np.full(dimension, 0.5 * -step_size)),
        )


@dataclass(slots=True)
class State:
    """A position with its log density and gradient (what carries over between iterations)."""

    position: np.ndarray
    log_density: float
    gradient: np.ndarray


def leapfrog(
    target: Target,
    metric: Metric,
    position: np.ndarray,
    momentum: np.ndarray,
    gradient: np.ndarray,
    step: float,
) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """One leapfrog step of signed size ``step`` (Neal 2011, eq. 5.18-5.20)."""
    half = momentum + (0.5 * step) * gradient
    new_position = position + step * metric.velocity(half)
    log_density, new_gradient = density_and_gradient(target, new_position)
    new_momentum = half + (0.5 * step) * new_gradient
    return new_position, new_momentum, log_density, new_gradient


def finite(x: np.ndarray) -> bool:
    """worker.samplers.target.all_finite(x), the same answer at the cost of one dot product
    when the entries are moderate, as they are on every trajectory that has not diverged.

    A finite x . x means every |x_i| < 1.4e154 (a sum of non-negative terms cannot hide an
    infinite one), so the sum that all_finite takes cannot overflow and is finite as well; only
    otherwise is that sum needed.
    """
    return x.dot(x) < math.inf or all_finite(x)


def hamiltonian(log_density: float, momentum: np.ndarray, metric: Metric) -> float:
    """H = -log density + kinetic energy; +inf outside the support or after overflow."""
    if not math.isfinite(log_density):
        return math.inf
    energy = -log_density + metric.kinetic(momentum)
    return energy if math.isfinite(energy) else math.inf
