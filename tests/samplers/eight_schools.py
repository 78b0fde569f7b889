"""The non-centred eight schools with a normal(0, 5) prior on mu: its density and exact answers.

Data: Rubin (1981), Estimation in parallel randomized experiments, J. Educational Statistics 6(4),
as reprinted in BDA3 Table 5.2 (Gelman et al. 2013), given here from memory:
y = (28, 8, -3, 7, -1, 1, 18, 12), sigma = (15, 10, 16, 11, 9, 11, 10, 18).
Model: y_j ~ N(theta_j, sigma_j), theta_j = mu + tau eta_j, eta_j ~ N(0, 1), mu ~ N(0, 5),
tau ~ half-Cauchy(0, 5).

Exact answers by one-dimensional quadrature over tau (BDA3 section 5.4, with the normal prior on
mu in place of the flat one): integrating mu out of N(mu | 0, 5^2) prod N(y_j | mu, sigma_j^2 +
tau^2) gives, with s_j = sigma_j^2 + tau^2, P = 1/25 + sum 1/s_j, mu_hat = sum(y_j / s_j) / P,
    p(tau | y) ~ p(tau) P^(-1/2) prod s_j^(-1/2)
                 exp(-sum (y_j - mu_hat)^2 / (2 s_j) - mu_hat^2 / 50),
then mu | tau, y ~ N(mu_hat, 1/P) and
    theta_j | mu, tau, y ~ N(V_j (y_j / sigma_j^2 + mu / tau^2), V_j)
with V_j = 1 / (1/sigma_j^2 + 1/tau^2) (completing the square; BDA3 equations 5.17-5.20).
So theta_1 | tau, y is normal with mean m(tau) = V_1 (y_1/sigma_1^2 + mu_hat/tau^2) and variance
V_1 + (V_1/tau^2)^2 / P, and its distribution function is the p(tau | y)-mixture of those.
"""

from __future__ import annotations

import math
from functools import cached_property

import numpy as np
from scipy import integrate, optimize, stats

Y = np.array([28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0])
SIGMA = np.array([15.0, 10.0, 16.0, 11.0, 9.0, 11.0, 10.0, 18.0])
MU_SCALE = 5.0
TAU_SCALE = 5.0

SPEC = {
    "inputs": {"schools": {"type": "integer"},
               "effect": {"type": "real", "shape": ["schools"]},
               "standard_error": {"type": "real", "shape": ["schools"], "lower": 0}},
    "unknowns": {"mu": {}, "tau": {"lower": 0}, "eta": {"shape": ["schools"]}},
    "derived": {"theta": "mu + tau * eta"},
    "priors": [{"on": "mu", "distribution": "normal",
                "arguments": {"location": 0, "scale": MU_SCALE}},
               {"on": "tau", "distribution": "half_cauchy", "arguments": {"scale": TAU_SCALE}},
               {"on": "eta", "distribution": "normal", "arguments": {"location": 0, "scale": 1}}],
    "likelihood": [{"name": "observed_effect", "observed": "effect", "distribution": "normal",
                    "arguments": {"location": "theta", "scale": "standard_error"}}],
}  # fmt: skip
DATA = {"schools": 8, "effect": Y.tolist(), "standard_error": SIGMA.tolist()}


class NonCentredSchools:
    """The posterior on (mu, log tau, eta_1..8), with the log-Jacobian of tau = e^u."""

    dimension = 10

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        mu, log_tau, eta = u[0], u[1], u[2:]
        tau = math.exp(log_tau)
        r = (Y - mu - tau * eta) / SIGMA
        value = (
            -0.5 * mu * mu / MU_SCALE**2
            - math.log1p((tau / TAU_SCALE) ** 2)
            + log_tau
            - 0.5 * float(eta @ eta)
            - 0.5 * float(r @ r)
        )
        w = r / SIGMA  # d log likelihood / d theta
        gradient = np.empty(10)
        gradient[0] = -mu / MU_SCALE**2 + w.sum()
        gradient[1] = 1.0 - 2.0 * tau * tau / (TAU_SCALE**2 + tau * tau) + tau * float(w @ eta)
        gradient[2:] = tau * w - eta
        return value, gradient


def _given_tau(tau: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """log p(tau | y) unnormalised, mu_hat(tau) and 1/P(tau), for an array of tau."""
    tau = np.asarray(tau, dtype=np.float64)[..., None]
    s = SIGMA**2 + tau**2
    precision = 1.0 / MU_SCALE**2 + np.sum(1.0 / s, axis=-1)
    mu_hat = np.sum(Y / s, axis=-1) / precision
    log_p = (
        stats.halfcauchy.logpdf(tau[..., 0], scale=TAU_SCALE)
        - 0.5 * np.log(precision)
        - 0.5 * np.sum(np.log(s), axis=-1)
        - 0.5 * np.sum((Y - mu_hat[..., None]) ** 2 / s, axis=-1)
        - mu_hat**2 / (2 * MU_SCALE**2)
    )
    return log_p, mu_hat, 1.0 / precision


def _theta1_given_tau(tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance of theta_1 given tau and y."""
    _, mu_hat, v_mu = _given_tau(tau)
    v1 = 1.0 / (1.0 / SIGMA[0] ** 2 + 1.0 / tau**2)
    mean = v1 * (Y[0] / SIGMA[0] ** 2 + mu_hat / tau**2)
    return mean, v1 + (v1 / tau**2) ** 2 * v_mu


class Marginal:
    """A distribution given by its exact cdf and pdf, with quantiles by root finding."""

    def __init__(self, cdf, pdf, low: float, high: float):
        self.cdf, self.pdf, self.low, self.high = cdf, pdf, low, high
        self._quantiles: dict[float, float] = {}

    def ppf(self, p: float) -> float:
        if p not in self._quantiles:  # each costs a root search over nested quadratures
            self._quantiles[p] = optimize.brentq(
                lambda x: self.cdf(x) - p, self.low, self.high, xtol=1e-10
            )
        return self._quantiles[p]


class Reference:
    """Exact posterior answers by scipy.integrate.quad, and exact draws by inverse transform."""

    @cached_property
    def _log_p_max(self) -> float:
        return float(np.max(_given_tau(np.exp(np.linspace(-5, 5, 2001)))[0]))

    def _density(self, tau: float) -> float:
        return float(np.exp(_given_tau(np.array(tau))[0] - self._log_p_max))

    def _moment(self, f) -> float:
        return integrate.quad(lambda t: f(t) * self._density(t), 0, np.inf, limit=400)[0]

    @cached_property
    def _norm(self) -> float:
        return self._moment(lambda t: 1.0)

    def tau_cdf(self, x: float) -> float:
        value = integrate.quad(self._density, 0, x, limit=400)[0]
        return value / self._norm

    def theta1_cdf(self, x: float) -> float:
        def integrand(t: float) -> float:
            mean, variance = _theta1_given_tau(np.array(t))
            return float(stats.norm.cdf(x, mean, math.sqrt(variance)))

        return self._moment(integrand) / self._norm

    def tau_pdf(self, x: float) -> float:
        return self._density(x) / self._norm

    def theta1_pdf(self, x: float) -> float:
        def integrand(t: float) -> float:
            mean, variance = _theta1_given_tau(np.array(t))
            return float(stats.norm.pdf(x, mean, math.sqrt(variance)))

        return self._moment(integrand) / self._norm

    @cached_property
    def tau(self) -> Marginal:
        return Marginal(self.tau_cdf, self.tau_pdf, 1e-9, 1e4)

    @cached_property
    def theta1(self) -> Marginal:
        return Marginal(self.theta1_cdf, self.theta1_pdf, -200.0, 200.0)

    @cached_property
    def theta1_sd(self) -> float:
        def mean(t: float) -> float:
            return float(_theta1_given_tau(np.array(t))[0])

        def second(t: float) -> float:
            m, v = _theta1_given_tau(np.array(t))
            return float(v + m * m)

        first = self._moment(mean) / self._norm
        return math.sqrt(self._moment(second) / self._norm - first**2)

    @cached_property
    def theta1_mean(self) -> float:
        return self._moment(lambda t: float(_theta1_given_tau(np.array(t))[0])) / self._norm

    def exact_draws(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """n independent posterior draws of (mu, log tau, eta), as NonCentredSchools has them.

        log tau by inverse transform on a fine grid of its distribution function (trapezoid
        rule on 400,001 points over log tau in [-20, 12], where all but a negligible share of
        the mass lies); then mu and theta given tau from their normal conditionals.
        """
        grid = np.linspace(-20.0, 12.0, 400_001)
        log_p = _given_tau(np.exp(grid))[0] + grid  # density of log tau
        density = np.exp(log_p - log_p.max())
        cdf = np.concatenate(([0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(grid))))
        log_tau = np.interp(rng.random(n), cdf / cdf[-1], grid)
        tau = np.exp(log_tau)
        _, mu_hat, v_mu = _given_tau(tau)
        mu = mu_hat + np.sqrt(v_mu) * rng.standard_normal(n)
        v = 1.0 / (1.0 / SIGMA**2 + 1.0 / tau[:, None] ** 2)
        theta = v * (Y / SIGMA**2 + mu[:, None] / tau[:, None] ** 2)
        theta += np.sqrt(v) * rng.standard_normal((n, 8))
        eta = (theta - mu[:, None]) / tau[:, None]
        return np.column_stack([mu, log_tau, eta])
