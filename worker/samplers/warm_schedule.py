"""The shorter warm-up of a chain that starts from an earlier chain's adapted state.

A warm start brings an earlier fit's adapted state (for NUTS and static HMC a step size and an
inverse metric; for Metropolis a proposal covariance and scale) and its final position, from a fit
of the same model to earlier data. Those are close to right for the new data, so the cold-start
stages of metric_adaptation.py are kept but laid out for a metric that needs correcting, not
finding:

1. approach, the first 25% of warm-up: the step size (or proposal scale) adapts while the chain
   moves from the earlier position into the new posterior, with the earlier metric from iteration 0;
2. shaping, to 80% of warm-up, with refits at 50% and 80%. The first block is drawn under the
   earlier metric, which may be off for the new data; the refit at 50% corrects it, and the final
   refit weighs the block drawn under the corrected metric fully and the first at OLDER_WEIGHT
   (DiscountedCovariance). Each refit is shrunk toward the earlier metric (its variances on the log
   scale, its correlations linearly), which acts as a prior guess worth EARLIER_COUNT draws: a short
   block corrects it where the new data moved the posterior without replacing it by a noisy
   estimate;
3. polish, the last 20%: the step size (or scale) only, to the refreshed metric.

When the first block would hold fewer than MINIMUM_BLOCK draws (warm-ups under 40 iterations) the
earlier metric is kept and only the step size adapts; a warm-up of 0 samples with the earlier state
as it is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from worker.samplers.metric_adaptation import (
    MINIMUM_BLOCK,
    WarmupSchedule,
    correlation_of,
    shrunk,
)

APPROACH_FRACTION = 0.25
FIRST_REFIT_FRACTION = 0.50
SHAPING_END_FRACTION = 0.80
# Fifty draws estimate a variance within about 20% (the relative sd of a sample variance is
# sqrt(2 / (n - 1))), about what an earlier fit of the same model is trusted to be off by.
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
    """Approach, two refits and polish inside a short warm-up (see the module docstring)."""
    approach = int(APPROACH_FRACTION * warmup)
    middle = int(FIRST_REFIT_FRACTION * warmup)
    if middle - approach < MINIMUM_BLOCK:
        return WarmupSchedule(warmup, approach, ())
    return WarmupSchedule(warmup, approach, (middle, int(SHAPING_END_FRACTION * warmup)))


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


def refreshed(earlier: np.ndarray, covariance: np.ndarray, effective: float) -> np.ndarray:
    """An estimate of ``effective`` draws shrunk toward the earlier metric: a valid metric."""
    # The earlier correlations are a real guess, so the new ones count from the first draw.
    return shrunk(
        covariance, effective, earlier, EARLIER_COUNT, EARLIER_COUNT, correlation_of(earlier), 0.0
    )
