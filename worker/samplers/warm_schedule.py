"""The shorter warm-up of a chain that starts from an earlier chain's adapted state.

A warm start brings an earlier fit's adapted state (for NUTS and static HMC a step size and an
inverse metric; for Metropolis a proposal covariance and scale) and its final position, from a fit
of the same model to earlier data. Those are close to right for the new data, so the windowed
warm-up of a cold start (metric_adaptation.py) is replaced by three stretches:

1. settle, the first 25% of warm-up: the step size (or proposal scale) adapts while the chain moves
   from the earlier position into the new posterior; the earlier metric is used from iteration 0;
2. one refresh window, to 80% of warm-up: at its end the metric becomes the window's covariance
   shrunk toward the earlier metric (not toward a scaled identity as in a cold start), with weight
   n / (n + EARLIER_COUNT) for a window of n draws. The earlier metric acts as a prior guess worth
   EARLIER_COUNT draws: a short window corrects it where the new data moved the posterior without
   replacing it by a noisy estimate;
3. final, the last 20%: the step size (or scale) only, to the refreshed metric.

Warm-ups shorter than 20 iterations keep the earlier metric and adapt the step size only; a warm-up
of 0 samples with the earlier state as it is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from worker.samplers.metric_adaptation import MIN_WINDOWED_WARMUP, RunningCovariance, WarmupSchedule

SETTLE_FRACTION = 0.25
REFRESH_END_FRACTION = 0.80
EARLIER_COUNT = 50.0


@dataclass(frozen=True)
class WarmStart:
    """An earlier chain's adapted state: where and how a warm-started chain begins.

    ``metric`` is the earlier chain's metric kind; ``covariance`` its inverse metric (Hamiltonian)
    or proposal covariance (Metropolis): (d,) for "per_coordinate" and "none", (d, d) for "full".
    Exactly one of ``step_size`` (Hamiltonian) and ``proposal_scale`` (Metropolis) is set.
    """

    metric: str
    covariance: np.ndarray
    step_size: float | None = None
    proposal_scale: float | None = None
    position: np.ndarray | None = None  # unconstrained; None leaves initialisation to settings


def warm_schedule(warmup: int) -> WarmupSchedule:
    """One refresh window inside a short warm-up (see the module docstring)."""
    if warmup < MIN_WINDOWED_WARMUP:
        return WarmupSchedule(warmup, ())
    start = int(SETTLE_FRACTION * warmup)
    end = int(REFRESH_END_FRACTION * warmup)
    return WarmupSchedule(warmup, ((start, end),))


def converted(covariance: np.ndarray, kind: str, dimension: int) -> np.ndarray:
    """An earlier metric as one of kind ``kind``.

    A dense one gives its diagonal to a diagonal metric; a diagonal one starts a dense metric with
    no correlations (the refresh window then estimates them); a unit metric has nothing to carry.
    """
    covariance = np.asarray(covariance, dtype=np.float64)
    if kind == "none":
        return np.ones(dimension)
    if kind == "full":
        return covariance if covariance.ndim == 2 else np.diag(covariance)
    return covariance if covariance.ndim == 1 else np.diagonal(covariance).copy()


def refreshed(earlier: np.ndarray, window: RunningCovariance) -> np.ndarray | None:
    """The window's covariance shrunk toward the earlier metric, or None if the window is unusable.

    A convex combination of a positive semi-definite covariance and a positive definite earlier
    metric is positive definite, so the result is always a valid metric.
    """
    covariance = window.covariance()
    if covariance is None:
        return None
    weight = window.count / (window.count + EARLIER_COUNT)
    result = weight * covariance + (1.0 - weight) * earlier
    if result.ndim == 2:
        result = 0.5 * (result + result.T)
    return result
