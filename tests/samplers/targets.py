"""Hand-written log densities with known answers for the sampler tests."""

from __future__ import annotations

import numpy as np
import scipy.special


class Gaussian:
    """N(mean, covariance), written from the multivariate normal density (common practice)."""

    def __init__(self, mean: np.ndarray, covariance: np.ndarray):
        self.mean = np.asarray(mean, dtype=np.float64)
        self.covariance = np.asarray(covariance, dtype=np.float64)
        self.precision = np.linalg.inv(self.covariance)
        self.dimension = self.mean.size
        self.gradient_calls = 0

    def log_density(self, u: np.ndarray) -> float:
        r = u - self.mean
        return float(-0.5 * r @ self.precision @ r)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        self.gradient_calls += 1
        r = u - self.mean
        g = -(self.precision @ r)
        return float(0.5 * r @ g), g


class IndependentGaussian:
    """Independent normals N(mean_i, sd_i^2): the diagonal case without a matrix product."""

    def __init__(self, mean: np.ndarray, sd: np.ndarray):
        self.mean = np.asarray(mean, dtype=np.float64)
        self.sd = np.asarray(sd, dtype=np.float64)
        self.dimension = self.mean.size

    def log_density(self, u: np.ndarray) -> float:
        z = (u - self.mean) / self.sd
        return float(-0.5 * z @ z)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        z = (u - self.mean) / self.sd
        return float(-0.5 * z @ z), -z / self.sd


class LogGamma:
    """u = log x with x ~ Gamma(shape, 1): density exp(shape u - e^u) / Gamma(shape).

    This is scipy.stats.loggamma(shape), a skewed target whose quantiles scipy gives exactly.
    """

    dimension = 1

    def __init__(self, shape: float):
        self.shape = shape

    def log_density(self, u: np.ndarray) -> float:
        return float(self.shape * u[0] - np.exp(u[0]) - scipy.special.gammaln(self.shape))

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        return self.log_density(u), np.array([self.shape - np.exp(u[0])])


class CentredFunnel:
    """Neal (2003), Slice sampling, section 8: v ~ N(0, 3^2), x_i | v ~ N(0, e^v), i = 1..9."""

    def __init__(self, size: int = 9):
        self.dimension = size + 1

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        v, x = u[0], u[1:]
        k = x.size
        scaled = np.exp(-v) * x
        value = -v * v / 18.0 - 0.5 * float(x @ scaled) - 0.5 * k * v
        grad_v = -v / 9.0 + 0.5 * float(x @ scaled) - 0.5 * k
        return value, np.concatenate(([grad_v], -scaled))


class NonCentredFunnel:
    """The same funnel written as v ~ N(0, 3^2), z_i ~ N(0, 1), x_i = e^(v/2) z_i (Neal 2003)."""

    def __init__(self, size: int = 9):
        self.dimension = size + 1

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        v, z = u[0], u[1:]
        value = -v * v / 18.0 - 0.5 * float(z @ z)
        return value, np.concatenate(([-v / 9.0], -z))


class OverflowingGradient:
    """A 1-d standard normal whose gradient overflows to +-inf outside |u| < 1.

    Stands for a model whose gradient overflows in part of the space: every leapfrog step that
    lands there must end the trajectory as a divergence, never produce NaN draws or raise.
    """

    dimension = 1

    def log_density(self, u: np.ndarray) -> float:
        return float(-0.5 * u[0] ** 2)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        blow_up = np.exp(800.0 * (abs(u[0]) - 1.0))  # inf (with a numpy warning) past |u| = 1.9
        return self.log_density(u), np.array([-u[0] * (1.0 + blow_up)])


class FiniteOnlyAt:
    """Finite log density only at one exact point, so every leapfrog step leaves the support."""

    def __init__(self, point: np.ndarray):
        self.point = np.asarray(point, dtype=np.float64)
        self.dimension = self.point.size

    def log_density(self, u: np.ndarray) -> float:
        return 0.0 if np.array_equal(u, self.point) else -np.inf

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        return self.log_density(u), np.zeros(self.dimension)


class FiniteInBall:
    """A standard normal truncated to |u|_inf < radius: -inf (density zero) outside."""

    def __init__(self, dimension: int, radius: float):
        self.dimension = dimension
        self.radius = radius
        self.evaluations = 0

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        self.evaluations += 1
        if np.max(np.abs(u)) >= self.radius:
            return -np.inf, np.zeros(self.dimension)
        return float(-0.5 * u @ u), -u


class NowhereFinite:
    """Zero density everywhere (for example contradictory constraints)."""

    def __init__(self, dimension: int):
        self.dimension = dimension

    def log_density(self, u: np.ndarray) -> float:
        return -np.inf

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        return -np.inf, np.zeros(self.dimension)
