"""The shorter warm-up of a chain that starts from an earlier job's adapted state.

A warm start brings a step size, an inverse metric and a position from a fit of the same model to
earlier data. Those are close to right for the new data, so the long windowed warm-up of a cold
start (metric_adaptation.py) is replaced by three stretches:

1. step size only (the first 25% of warm-up): dual averaging from the earlier step size while the
   chain moves from the earlier position into the new posterior;
2. one metric refresh window (to 80% of warm-up): the window's regularised covariance is averaged
   with the earlier inverse metric, weighting the earlier one as if it came from a window of the
   same length, so a short window refreshes the metric without replacing it by a noisy estimate;
3. step size only (the last 20%), to the refreshed metric.

Warm-ups shorter than 20 iterations keep the earlier metric and adapt the step size only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from worker.samplers.metric_adaptation import MIN_WINDOWED_WARMUP, WarmupSchedule

SETTLE_FRACTION = 0.25
REFRESH_END_FRACTION = 0.80


@dataclass(frozen=True)
class WarmStart:
    """An earlier chain's adapted state: where and how a warm-started chain begins."""

    step_size: float
    inverse_metric: np.ndarray  # (d,) for a diagonal metric, (d, d) for a dense one
    position: np.ndarray | None = None  # unconstrained; None leaves initialisation to settings


def warm_schedule(warmup: int) -> WarmupSchedule:
    """One refresh window inside a short warm-up (see the module docstring)."""
    if warmup < MIN_WINDOWED_WARMUP:
        return WarmupSchedule(warmup, ())
    start = int(SETTLE_FRACTION * warmup)
    end = int(REFRESH_END_FRACTION * warmup)
    return WarmupSchedule(warmup, ((start, end),))


def refreshed(earlier: np.ndarray, estimate: np.ndarray) -> np.ndarray:
    """The earlier inverse metric and a window's estimate averaged with equal weight.

    Equal weight counts the earlier metric as a window of the same length. Both are positive
    definite (or positive, diagonal), so their average is too.
    """
    return 0.5 * (np.asarray(earlier, dtype=np.float64) + estimate)
