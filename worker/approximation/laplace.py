"""The Laplace approximation and its check by Pareto smoothed importance sampling.

A Gaussian at the mode of the log density on the unconstrained scale (Jacobian included), with
covariance the inverse of the negative Hessian there (BDA3, Gelman et al. 2013, section 13.3).
Its draws are mapped back through the model's transforms by report(). The check: importance
ratios of the true density to the Gaussian at the Gaussian's own draws, Pareto smoothed (Vehtari,
Simpson, Gelman, Yao & Gabry 2024, JMLR 25); k-hat says how far the approximation can be used.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import psis
from .curvature import covariance_from_hessian, hessian
from .mode import ModeNotFound, find_mode

# Draws from the Gaussian when none are asked for: our choice, as many as a default job of four
# chains of 1000 keeps, so the PSIS check has the same footing (k threshold 0.7 at S = 4000).
DEFAULT_DRAWS = 4000

VERDICTS = ("trustworthy", "usable_with_importance_resampling", "run_chains")


@dataclass
class LaplaceResult:
    mode: np.ndarray                 # unconstrained
    log_density_at_mode: float
    covariance: np.ndarray           # unconstrained
    draws: np.ndarray                # (S, dimension) unconstrained, from the Gaussian
    values: np.ndarray               # (S, quantities) report() of each draw
    log_weights: np.ndarray          # (S,) PSIS-smoothed, normalised
    k_hat: float
    effective_draws: float
    verdict: str                     # one of VERDICTS
    reason: str
    disagreements: list[str] = field(default_factory=list)
    gradient_calls: int = 0


def check_verdict(k_hat: float, draws: int) -> tuple[str, str]:
    """PSIS 2024, section 3 (and Yao, Vehtari, Simpson & Gelman 2018 for this reading of k-hat
    for approximations; from memory): below 0.5 the raw ratios have a finite variance and the
    Gaussian itself is close; below the sample-size threshold the smoothed weights make importance
    resampling reliable; above it, neither is."""
    if not np.isfinite(k_hat):
        return ("trustworthy", "the importance ratios are constant: the Gaussian equals the "
                               "density up to rounding")
    threshold = psis.k_threshold(draws)
    if k_hat < psis.GOOD_K:
        return ("trustworthy", f"Pareto k-hat {k_hat:.2f} is below {psis.GOOD_K}: the Gaussian "
                               "is close to the posterior")
    if k_hat < threshold:
        return ("usable_with_importance_resampling",
                f"Pareto k-hat {k_hat:.2f} is between {psis.GOOD_K} and {threshold:.2f}: use "
                "the importance-resampled draws, not the Gaussian's own")
    return ("run_chains", f"Pareto k-hat {k_hat:.2f} is above {threshold:.2f}: the Gaussian "
                          "misses the posterior's shape; run chains")


# Log ratios that spread less than this are equal to rounding (a Gaussian posterior): PSIS would
# fit a Pareto tail to noise; our choice, far above rounding in log densities of order 1e3.
CONSTANT_RATIOS = 1e-8


def laplace(model: Any, rng: np.random.Generator, draws: int = DEFAULT_DRAWS,
            starts: int | None = None) -> LaplaceResult:
    """Mode, curvature, Gaussian draws mapped through model.report, and the PSIS check.

    model: a CompiledModel (log_density, log_density_and_gradient, report, dimension).
    Raises ModeNotFound when no optimum is found or the curvature there is not a maximum's.
    """
    search = find_mode(model, rng) if starts is None else find_mode(model, rng, starts=starts)
    h = hessian(model, search.mode)
    factored = covariance_from_hessian(h)
    if factored is None:
        raise ModeNotFound("the curvature at the best optimum is not that of a maximum (the "
                           "negative Hessian is not positive definite): the density is flat or "
                           "unbounded in some direction, so no Gaussian approximates it")
    covariance, factor = factored
    z = rng.standard_normal((draws, model.dimension))
    u = search.mode + z @ factor.T
    log_q = -0.5 * np.sum(z * z, axis=1)   # up to a constant, which PSIS ignores
    log_p = np.array([model.log_density(row) for row in u])
    log_r = log_p - log_q
    finite = np.isfinite(log_r)
    if finite.any() and np.ptp(log_r[finite]) < CONSTANT_RATIOS * max(1.0, abs(search.log_density)):
        log_w = np.where(finite, -np.log(finite.sum()), -np.inf)
        k_hat, effective = float("nan"), float(finite.sum())
    else:
        smoothed = psis.smooth(log_r)
        log_w, k_hat = smoothed.log_weights, float(smoothed.k_hat)
        effective = float(smoothed.effective_draws)
    verdict, reason = check_verdict(k_hat, draws)
    values = np.array([model.report(row, rng) for row in u]).reshape(draws, -1)
    calls = sum(r.gradient_calls for r in search.runs) + 2 * model.dimension
    return LaplaceResult(search.mode, search.log_density, covariance, u, values, log_w, k_hat,
                         effective, verdict, reason, search.disagreements, calls)


def importance_resample(log_weights: np.ndarray, rng: np.random.Generator,
                        size: int) -> np.ndarray:
    """Indices of `size` draws resampled without replacement with probabilities from the smoothed
    weights (without replacement keeps repeats out; Skare, Bolviken & Holden 2003 show it reduces
    the resampling error, from memory), or with replacement when size exceeds the draws with
    positive weight."""
    p = np.exp(log_weights - np.max(log_weights))
    p /= p.sum()
    positive = int(np.count_nonzero(p))
    return rng.choice(p.shape[0], size=size, replace=size > positive, p=p)
