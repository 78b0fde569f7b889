"""Laplace and grid jobs: the approximations run where a chain would, with a chain's interface.

A job whose `sampler.method` is "laplace" or "grid" has one task (chains = 1). Its run returns a
ChainResult like a chain's, so the worker, the store, the downloads and the audit record treat it
as any job: the draws are the approximation's draws mapped through the model (derived and per-draw
quantities computed per draw), the per-draw statistics say what each draw weighs, and the
"adapted" record holds what the method found (mode, covariance, k-hat; or the grid's extent).
The job's verdict is the approximation's own check instead of the chains' convergence checks.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from . import psis
from .grid import MAX_DIMENSION, grid_posterior
from .laplace import laplace

APPROXIMATION_METHODS = ("laplace", "grid")


def _finite_or_none(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


class ApproximationRun:
    """One approximation of a compiled model, ready to run; `result_type` builds the ChainResult
    (passed in, so this module does not import the runner that imports it)."""

    # An approximation takes seconds and is started over rather than resumed, so there is no
    # snapshot to take between iterations (the worker's monitor checks for None).
    snapshot = None

    def __init__(self, model: Any, method: str, seed: np.random.SeedSequence, draws: int,
                 result_type: Callable[..., Any]):
        self.model = model
        self.method = method
        self.seed = seed
        self.draws = draws
        self.result_type = result_type

    def run(self, progress: Callable[[str, int, int], None] | None = None,
            should_stop: Callable[[], bool] | None = None,
            checkpoint: Callable[[bytes], None] | None = None,
            checkpoint_every: int = 100) -> Any:
        rng = np.random.default_rng(self.seed)
        if self.method == "laplace":
            values, stats, adapted = self._laplace(rng)
        else:
            values, stats, adapted = self._grid(rng)
        if progress is not None:
            progress("sampling", self.draws, 0)
        return self.result_type(names=list(self.model.quantity_names), values=values,
                                stats=stats, adapted=adapted, completed=True)

    def _laplace(self, rng: np.random.Generator) -> tuple[np.ndarray, dict, dict]:
        result = laplace(self.model, rng, draws=self.draws)
        log_density = np.array([self.model.log_density(u) for u in result.draws])
        stats = {"log_weight": result.log_weights, "log_density": log_density}
        adapted = {
            "method": "laplace",
            "mode": result.mode.tolist(),
            "log_density_at_mode": result.log_density_at_mode,
            "covariance": result.covariance.tolist(),
            "k_hat": _finite_or_none(result.k_hat),
            "k_threshold": psis.k_threshold(self.draws),
            "effective_draws": result.effective_draws,
            "assessment": result.verdict,
            "reason": result.reason,
            "disagreements": result.disagreements,
            "gradient_calls": result.gradient_calls,
        }
        return result.values, stats, adapted

    def _grid(self, rng: np.random.Generator) -> tuple[np.ndarray, dict, dict]:
        result = grid_posterior(self.model, rng, draws=self.draws)
        adapted = {
            "method": "grid",
            "axes": [{"lower": float(a[0]), "upper": float(a[-1]), "points": int(a.size)}
                     for a in result.axes],
            "marginal_density": [m.tolist() for m in result.marginals],
            "log_evidence": result.log_evidence,
            "outside_mass": result.outside_mass,
            "means": result.means.tolist(),
            "sds": result.sds.tolist(),
            "quantiles": {f"{p:g}": q.tolist() for p, q in result.quantiles.items()},
            "notes": result.notes,
            "assessment": "exact",
        }
        # Inverse-transform draws are independent and equally weighted.
        return result.draws, {"log_weight": np.full(self.draws, -np.log(self.draws))}, adapted


def grid_dimension_problem(model: Any) -> str | None:
    """A sentence when the model has too many unconstrained coordinates for a grid."""
    if model.dimension <= MAX_DIMENSION:
        return None
    return (f"the grid method covers at most {MAX_DIMENSION} unconstrained coordinates; this "
            f"model has {model.dimension} (unknowns {', '.join(model.unknown_names)}): use "
            "laplace or chains")


def approximation_verdict(results: list[Any]) -> tuple[dict, dict]:
    """(sampler report, verdict) of an approximation job's single result."""
    adapted = results[0].adapted
    report = {key: value for key, value in adapted.items()
              if key not in ("covariance", "marginal_density", "quantiles", "means", "sds")}
    if adapted["method"] == "grid":
        return report, {"passed": True, "failed_checks": [], "assessment": "exact"}
    assessment = adapted["assessment"]
    failed = []
    if assessment != "trustworthy":
        failed.append({
            "check": "pareto_k", "quantity": None, "chain": None, "value": adapted["k_hat"],
            "threshold": psis.GOOD_K, "message": adapted["reason"],
        })
    for sentence in adapted["disagreements"]:
        failed.append({"check": "mode_agreement", "quantity": None, "chain": None,
                       "value": None, "threshold": None, "message": sentence})
    return report, {"passed": not failed, "failed_checks": failed, "assessment": assessment}
