"""The marginal likelihood of a fit by bridge sampling.

Meng & Wong (1996), "Simulating ratios of normalizing constants via a simple identity",
Statistica Sinica 6: the iterative estimator of the optimal bridge. Gronau et al. (2017), "A
tutorial on bridge sampling", J. Math. Psych. 81, for the practical recipe (equation numbers from
memory): half of the posterior draws fit a multivariate normal proposal g on the unconstrained
scale, the other half and as many draws from g enter the iteration

    p_hat(t+1) = [1/N2 sum_i l2_i / (s1 l2_i + s2 p_hat(t))]
                 / [1/N1 sum_j 1 / (s1 l1_j + s2 p_hat(t))]

with l = q / g the unnormalised posterior over the proposal, and s1, s2 the shares of the two
samples, N1 counted by its effective sample size for MCMC draws. Its relative mean-squared error
follows Fruhwirth-Schnatter (2004) as given in Gronau et al. (2017, section 4.3).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..diagnostics.ess import ess

# Iteration stops when log p_hat moves less than this; our choice, far below any error estimate.
TOLERANCE = 1e-10
MAX_ITERATIONS = 1000
# Warn when the fitting half holds fewer than this many draws per unknown: the sample covariance
# of N draws in d dimensions has relative errors of order sqrt(d / N); our choice.
DRAWS_PER_DIMENSION = 10
# Warn when the estimated relative error of the evidence exceeds this (log evidence uncertain by
# about as much); our choice. A proposal that fits the posterior badly shows here: the error
# grows as the overlap of the two shrinks (Gronau et al. 2017, section 4.3).
MAX_RELATIVE_ERROR = 0.1


@dataclass(frozen=True)
class Evidence:
    log_evidence: float
    relative_error: float            # sqrt of the relative mean-squared error of p_hat
    iterations: int
    warnings: list[str] = field(default_factory=list)


class TooFewDraws(ValueError):
    pass


def _log_mean_exp(a: np.ndarray) -> float:
    top = float(np.max(a))
    return top + float(np.log(np.mean(np.exp(a - top))))


def _log_normal(points: np.ndarray, mean: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """log N(points; mean, L L^T) for lower-triangular L."""
    z = np.linalg.solve(factor, (points - mean).T).T
    d = mean.shape[0]
    return (-0.5 * np.sum(z * z, axis=1) - np.sum(np.log(np.diag(factor)))
            - 0.5 * d * np.log(2 * np.pi))


def bridge_sampling(model: Any, draws: np.ndarray, rng: np.random.Generator) -> Evidence:
    """log p(y) from posterior draws on the unconstrained scale, shaped (chains, draws, dimension).

    model needs log_density(u), the full normalised log density with Jacobians (a CompiledModel).
    Raises TooFewDraws when the fitting half cannot give a full-rank covariance.
    """
    chains, per_chain, d = draws.shape
    half = per_chain // 2
    fitting = draws[:, :half].reshape(-1, d)
    iterating = draws[:, half:2 * half]
    warnings: list[str] = []
    if half < 4 or fitting.shape[0] <= d + 1:
        raise TooFewDraws(f"bridge sampling needs more than {d + 1} draws in the fitting half "
                          f"for {d} unknowns on the unconstrained scale; the fit has "
                          f"{fitting.shape[0]}")
    if fitting.shape[0] < DRAWS_PER_DIMENSION * d:
        warnings.append(f"only {fitting.shape[0]} draws fit the proposal for {d} unconstrained "
                        f"coordinates (fewer than {DRAWS_PER_DIMENSION} per coordinate): the "
                        "estimate may be poor; run longer chains")
    mean = fitting.mean(axis=0)
    covariance = np.atleast_2d(np.cov(fitting, rowvar=False))
    try:
        factor = np.linalg.cholesky(covariance)
    except np.linalg.LinAlgError as error:
        raise TooFewDraws("the draws do not vary in every unconstrained direction, so no "
                          "proposal can be fitted to them") from error
    n1 = chains * half
    n2 = n1
    posterior = iterating.reshape(-1, d)
    proposal = mean + rng.standard_normal((n2, d)) @ factor.T
    log_q1 = np.array([model.log_density(u) for u in posterior])
    log_q2 = np.array([model.log_density(u) for u in proposal])
    if not np.all(np.isfinite(log_q1)):
        raise ValueError("the model's log density is not finite at some posterior draws: the "
                         "draws do not belong to this model and data")
    l1 = log_q1 - _log_normal(posterior, mean, factor)
    l2 = log_q2 - _log_normal(proposal, mean, factor)   # -inf where g strays outside the support
    effective = ess(l1.reshape(chains, half))
    if not np.isfinite(effective):
        effective = float(n1)
    s1 = np.log(effective / (effective + n2))
    s2 = np.log(n2 / (effective + n2))
    estimate = _log_mean_exp(l2[np.isfinite(l2)]) if np.isfinite(l2).any() else float(np.max(l1))
    iterations = 0
    for step in range(1, MAX_ITERATIONS + 1):
        iterations = step
        numerator = _log_mean_exp(l2 - np.logaddexp(s1 + l2, s2 + estimate))
        denominator = _log_mean_exp(-np.logaddexp(s1 + l1, s2 + estimate))
        updated = numerator - denominator
        converged = abs(updated - estimate) < TOLERANCE
        estimate = updated
        if converged:
            break
    else:
        warnings.append(f"the iteration did not settle within {MAX_ITERATIONS} steps")
    # Relative mean-squared error (Gronau et al. 2017, section 4.3, after Fruhwirth-Schnatter
    # 2004): f1 = p / (s1 p + s2 g) under g, f2 = g / (s1 p + s2 g) under the posterior, with
    # p = q / p_hat; the posterior term counts its effective size through f2's own ESS.
    w1, w2 = np.exp(s1), np.exp(s2)
    f1 = np.exp(l2 - estimate) / (w1 * np.exp(l2 - estimate) + w2)
    f2 = 1.0 / (w1 * np.exp(l1 - estimate) + w2)
    f2_effective = ess(f2.reshape(chains, half))
    if not np.isfinite(f2_effective):
        f2_effective = float(n1)
    relative_mse = (np.var(f1) / (n2 * np.mean(f1) ** 2)
                    + np.var(f2) / (f2_effective * np.mean(f2) ** 2))
    relative_error = float(np.sqrt(relative_mse))
    if relative_error > MAX_RELATIVE_ERROR:
        warnings.append(f"the estimated relative error {relative_error:.2g} is above "
                        f"{MAX_RELATIVE_ERROR:g}: the log evidence is uncertain by about as much, "
                        "the proposal may fit the posterior badly; run longer chains")
    return Evidence(float(estimate), relative_error, iterations, warnings)


@dataclass(frozen=True)
class BayesFactor:
    log_bayes_factor: float          # log p(y | first) - log p(y | second)
    error: float                     # approximate sd of the log Bayes factor


def bayes_factor(first: Evidence, second: Evidence) -> BayesFactor:
    """The two estimates are independent, and the relative error of p_hat is to first order the
    sd of log p_hat (delta method), so their errors add in quadrature."""
    return BayesFactor(first.log_evidence - second.log_evidence,
                       float(np.hypot(first.relative_error, second.relative_error)))
