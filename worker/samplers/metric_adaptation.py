"""Windowed warm-up: when the metric is re-estimated, and the running covariance that estimates it.

Warm-up is split into three stretches:

1. an initial fast stretch (15% of warm-up) where only the step size adapts, so the chain can reach
   the bulk of the distribution before any draws are used to estimate its shape;
2. a slow stretch of windows of doubling length (the first max(10, 5% of warm-up) long). At the end
   of each window the metric becomes the regularised covariance of that window's draws and the
   step size is re-initialised; the estimate restarts, so the early, less converged draws are
   forgotten. The last window is stretched to the end of the slow stretch when the window after it
   would not fit, which makes the final estimate the longest one;
3. a final fast stretch (10% of warm-up) that adapts the step size to the final metric only.

With the default 1000 warm-up iterations this gives 150 fast iterations, windows of 50, 100, 200
and 400, and 100 final iterations. Warm-ups shorter than 20 iterations adapt the step size only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

INITIAL_FRACTION = 0.15
FINAL_FRACTION = 0.10
FIRST_WINDOW_FRACTION = 0.05
MIN_FIRST_WINDOW = 10
MIN_WINDOWED_WARMUP = 20
# Pseudo-count of the shrinkage toward a scaled identity: a window of n draws gets weight
# n / (n + SHRINKAGE_COUNT). Small windows (noisy estimates, singular when n <= d) are pulled
# strongly toward the average variance; long windows are barely changed.
SHRINKAGE_COUNT = 10.0


@dataclass(frozen=True)
class WarmupSchedule:
    warmup: int
    windows: tuple[tuple[int, int], ...]  # [start, end) iteration indices of each metric window

    @property
    def window_ends(self) -> frozenset[int]:
        return frozenset(end for _, end in self.windows)

    def in_window(self, iteration: int) -> bool:
        return any(start <= iteration < end for start, end in self.windows)

    @property
    def final_start(self) -> int:
        """First iteration of the final fast stretch (step size only)."""
        return self.windows[-1][1] if self.windows else 0


def warmup_schedule(warmup: int) -> WarmupSchedule:
    """The window layout for a warm-up of ``warmup`` iterations (see the module docstring)."""
    if warmup < MIN_WINDOWED_WARMUP:
        return WarmupSchedule(warmup, ())
    initial = int(INITIAL_FRACTION * warmup)
    final = int(FINAL_FRACTION * warmup)
    slow_end = warmup - final
    size = max(MIN_FIRST_WINDOW, int(FIRST_WINDOW_FRACTION * warmup))
    windows: list[tuple[int, int]] = []
    start = initial
    while start < slow_end:
        if start + 3 * size > slow_end:
            windows.append((start, slow_end))
            break
        windows.append((start, start + size))
        start += size
        size *= 2
    return WarmupSchedule(warmup, tuple(windows))


class RunningCovariance:
    """Welford's running mean and (co)variance of the draws in one window."""

    def __init__(self, dimension: int, dense: bool):
        self.dense = dense
        self.count = 0
        self.mean = np.zeros(dimension)
        self.scatter = np.zeros((dimension, dimension) if dense else dimension)

    def add(self, x: np.ndarray) -> None:
        self.count += 1
        delta = x - self.mean
        self.mean += delta / self.count
        if self.dense:
            self.scatter += np.outer(delta, x - self.mean)
        else:
            self.scatter += delta * (x - self.mean)

    def reset(self) -> None:
        self.count = 0
        self.mean[...] = 0.0
        self.scatter[...] = 0.0

    def regularised(self) -> np.ndarray | None:
        """The window's covariance shrunk toward (average variance) x identity, or None if unusable.

        None when fewer than two draws were seen or the chain did not move (zero or non-finite
        spread); the caller then keeps the metric it had.
        """
        covariance = self.covariance()
        if covariance is None:
            return None
        variances = np.diag(covariance) if self.dense else covariance
        scale = float(np.mean(variances))
        weight = self.count / (self.count + SHRINKAGE_COUNT)
        if self.dense:
            shrunk = weight * covariance + (1.0 - weight) * scale * np.eye(len(self.mean))
            shrunk = 0.5 * (shrunk + shrunk.T)
            try:
                np.linalg.cholesky(shrunk)
            except np.linalg.LinAlgError:
                return None
            return shrunk
        shrunk = weight * covariance + (1.0 - weight) * scale
        return shrunk if np.all(shrunk > 0.0) else None

    def covariance(self) -> np.ndarray | None:
        """The window's sample covariance (variances when diagonal), or None if unusable.

        None when fewer than two draws were seen or the chain did not move (zero or non-finite
        spread).
        """
        if self.count < 2:
            return None
        covariance = self.scatter / (self.count - 1)
        variances = np.diag(covariance) if self.dense else covariance
        scale = float(np.mean(variances))
        if not np.isfinite(scale) or scale <= 0.0 or not np.all(np.isfinite(covariance)):
            return None
        return covariance

    def arrays(self, prefix: str) -> dict[str, np.ndarray]:
        return {f"{prefix}mean": self.mean, f"{prefix}scatter": self.scatter}

    def load(self, count: int, arrays: dict[str, np.ndarray], prefix: str) -> None:
        self.count = count
        self.mean = np.array(arrays[f"{prefix}mean"], dtype=np.float64)
        self.scatter = np.array(arrays[f"{prefix}scatter"], dtype=np.float64)
