"""Cold-start warm-up: when the metric is refitted, and the discounted covariance that refits it.

Warm-up has three stages:

1. approach, the first max(APPROACH_MINIMUM, APPROACH_FRACTION x warm-up) iterations: the step
   size adapts with the unit metric while the chain falls from its starting point into the bulk.
   Those draws are never used for the metric: far from the bulk they would inflate it.
2. shaping, from the end of approach to SHAPING_END_FRACTION of warm-up: the metric is refitted
   MINIMUM_BLOCK draws after the end of approach, at SHAPING_END_FRACTION of warm-up, and at
   points between them in a geometric progression whose ratio is the nearest to GROWTH that a
   whole number of steps allows. Each refit uses the draws of the block just ended at full weight
   and those of the block before it at weight OLDER_WEIGHT (DiscountedCovariance), shrunk as
   ``shrunk`` says; anything older is forgotten, so what the chain did under a poor early metric
   stops counting, and the first block, which may still hold the end of the approach, is never
   carried on. After a refit the step size is searched afresh and dual averaging restarts.
3. polish, the last 1 - SHAPING_END_FRACTION of warm-up: the step size only, to the final metric.

With the default 1000 warm-up iterations: approach 0-10, refits after iterations 20, 42, 87, 183,
383 and 800, polish 800-1000; with 200: approach 0-10, refits after 20, 40, 80 and 160. Warm-ups
under 25 iterations (no room for a first block before 80%) adapt the step size only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# Approach: the chain's excess energy far out in the tails falls by about half an iteration (each
# momentum refresh takes away the kinetic energy a trajectory built up), so 10 iterations bring
# an excess of 2^10 ~ 1000 log-density units back toward the bulk. It is kept that short because
# once in the bulk every iteration under a badly wrong unit metric can run to the tree-depth cap
# (2^10 gradients); a longer fall ends inside the first block, which is why that block is never
# carried into a later fit. 1% keeps long warm-ups proportionate.
APPROACH_MINIMUM = 10
APPROACH_FRACTION = 0.01
# Shaping ends at 80%: polish then has 20% of warm-up (200 of 1000) for dual averaging to settle
# on the final metric; its averaged iterate forgets its restart within a few dozen iterations
# (Hoffman & Gelman 2014, section 3.2: t0 = 10, kappa = 0.75), and the remainder is averaging.
SHAPING_END_FRACTION = 0.80
# Refit points: from the end of the first block to the end of shaping in a geometric progression
# whose ratio is as near GROWTH as a whole number of steps allows. Doubling blocks let the early
# refits come within a few dozen iterations (the unit metric can be off by orders of magnitude)
# while the final fit still rests on half of warm-up's shaping draws plus the older block.
GROWTH = 2.0
# Ten draws give a variance within a factor of about two (chi-square with 9 degrees of freedom,
# 5% and 95% points 0.37 and 1.88 of the mean): rough, but the next, twice longer block corrects it.
MINIMUM_BLOCK = 10
# The block before the last was drawn under a worse metric, so it counts for half: its draws still
# add about a fifth to a fit's effective count (Kish: a block of n and one of n/2 at weight 1/2
# give (5n/4)^2 / (9n/8) = 1.39 n, against n alone).
OLDER_WEIGHT = 0.5
# Shrinkage (``shrunk``). Variances, on the log scale, toward the metric in use, worth one draw: at
# a cold start that metric is no real guess, so it only keeps a coordinate that barely moved from
# collapsing. Correlations toward zero, worth CORRELATION_COUNT draws, counting only the draws
# beyond a multiple of the dimension (a sample correlation matrix of n draws has rank n - 1 and
# its small eigenvalues are far too small until n is several times d). NUTS starts trusting them
# at d/2: it lengthens its trajectories in a direction the metric gets too narrow. Static HMC and
# Metropolis take fixed-length moves in the metric's units, so a direction estimated too narrow is
# explored slowly, estimated too narrow again, and the error feeds itself: they wait for d draws.
# Ten draws was the pseudo-count that kept the condition number of the preconditioned 100-d
# AR(0.9) covariance lowest at 300-555 independent draws in a numerical check (cond 4.8 at 555
# draws against 5.8 unshrunk and 7.1 at a count of 100).
VARIANCE_COUNT = 1.0
CORRELATION_COUNT = 10.0
NUTS_CORRELATIONS_AFTER = 0.5
FIXED_CORRELATIONS_AFTER = 1.0


@dataclass(frozen=True)
class WarmupSchedule:
    warmup: int
    approach_end: int  # first iteration whose draw the metric estimate collects
    refits: tuple[int, ...]  # the metric is refitted after these many iterations, increasing

    def collects(self, iteration: int) -> bool:
        """Whether iteration ``iteration``'s draw goes into the metric estimate."""
        return bool(self.refits) and self.approach_end <= iteration < self.refits[-1]

    @property
    def polish_start(self) -> int:
        """First iteration of polish (step size only, to the final metric)."""
        return self.refits[-1] if self.refits else 0


def warmup_schedule(warmup: int) -> WarmupSchedule:
    """The stages of a cold-start warm-up of ``warmup`` iterations (see the module docstring)."""
    approach = max(APPROACH_MINIMUM, int(APPROACH_FRACTION * warmup))
    first = approach + MINIMUM_BLOCK
    last = int(SHAPING_END_FRACTION * warmup)
    if last < first:
        return WarmupSchedule(warmup, approach, ())
    gaps = max(0, round(math.log(last / first) / math.log(GROWTH)))
    ratio = (last / first) ** (1.0 / gaps) if gaps else 1.0
    points = sorted({int(round(first * ratio**k)) for k in range(gaps)} | {last})
    return WarmupSchedule(warmup, approach, tuple(points))


class _Block:
    """Welford's running mean and scatter of one block of draws."""

    def __init__(self, dimension: int, dense: bool):
        self.count = 0
        self.mean = np.zeros(dimension)
        self.scatter = np.zeros((dimension, dimension) if dense else dimension)
        self.dense = dense

    def add(self, x: np.ndarray) -> None:
        self.count += 1
        delta = x - self.mean
        self.mean += delta / self.count
        if self.dense:
            self.scatter += np.outer(delta, x - self.mean)
        else:
            self.scatter += delta * (x - self.mean)

    def copy_from(self, other: _Block) -> None:
        self.count = other.count
        self.mean[...] = other.mean
        self.scatter[...] = other.scatter

    def clear(self) -> None:
        self.count = 0
        self.mean[...] = 0.0
        self.scatter[...] = 0.0


class DiscountedCovariance:
    """The covariance of the last block of draws at weight 1 and the block before at ``older``.

    ``estimate`` equals numpy.cov of the two blocks' draws with those weights as ``aweights``,
    computed from each block's count, mean and scatter (the pooled-scatter identity), so no draw is
    stored. ``advance`` starts a new block at a refit: the current block becomes the older one and
    the older one is forgotten.
    """

    def __init__(self, dimension: int, dense: bool, older: float = OLDER_WEIGHT):
        self.dense = dense
        self.older_weight = older
        self.current = _Block(dimension, dense)
        self.older = _Block(dimension, dense)

    def add(self, x: np.ndarray) -> None:
        self.current.add(x)

    def advance(self, keep: bool = True) -> None:
        """Start a new block; the one just ended becomes the older block if ``keep``, else it is
        forgotten too."""
        if keep:
            self.older.copy_from(self.current)
        else:
            self.older.clear()
        self.current.clear()

    def estimate(self) -> tuple[np.ndarray, float] | None:
        """(weighted covariance, effective count), or None with fewer than two draws.

        The effective count is Kish's (sum of weights)^2 / (sum of squared weights). The
        normalisation is numpy.cov's for ``aweights`` with ddof 1: scatter / (v1 - v2 / v1).
        """
        w = self.older_weight if self.older.count else 0.0
        blocks = [(1.0, self.current), (w, self.older)]
        v1 = sum(weight * block.count for weight, block in blocks)
        v2 = sum(weight * weight * block.count for weight, block in blocks)
        if self.current.count + (self.older.count if w else 0) < 2 or v1 <= 0.0:
            return None
        mean = sum(weight * block.count * block.mean for weight, block in blocks) / v1
        scatter = np.zeros_like(self.current.scatter)
        for weight, block in blocks:
            if weight == 0.0 or block.count == 0:
                continue
            offset = block.mean - mean
            spread = np.outer(offset, offset) if self.dense else offset * offset
            scatter += weight * (block.scatter + block.count * spread)
        covariance = scatter / (v1 - v2 / v1)
        if not np.all(np.isfinite(covariance)):
            return None
        return covariance, v1 * v1 / v2

    def arrays(self, prefix: str) -> dict[str, np.ndarray]:
        return {
            f"{prefix}mean": self.current.mean,
            f"{prefix}scatter": self.current.scatter,
            f"{prefix}older_mean": self.older.mean,
            f"{prefix}older_scatter": self.older.scatter,
        }

    def counts(self) -> list[int]:
        return [self.current.count, self.older.count]

    def load(self, counts: list[int], arrays: dict[str, np.ndarray], prefix: str) -> None:
        for block, count, name in zip(
            (self.current, self.older), counts, ("", "older_"), strict=True
        ):
            block.count = int(count)
            block.mean = np.array(arrays[f"{prefix}{name}mean"], dtype=np.float64)
            block.scatter = np.array(arrays[f"{prefix}{name}scatter"], dtype=np.float64)


def shrunk(
    covariance: np.ndarray,
    effective: float,
    target: np.ndarray,
    variance_count: float = VARIANCE_COUNT,
    correlation_count: float = CORRELATION_COUNT,
    target_correlation: np.ndarray | None = None,
    correlations_after: float = FIXED_CORRELATIONS_AFTER,
) -> np.ndarray:
    """An estimate pulled toward a target metric: a valid (positive definite) metric always.

    Each variance moves on the log scale: log v = (n log v_hat + c log v_target) / (n + c), with n
    the estimate's effective count and c = ``variance_count``. On the log scale a variance 10^4
    times smaller than another is pulled toward its own target, never toward the others: pulling
    toward the average variance is what let a metric go wrong by orders of magnitude on targets
    whose scales spread over decades. A variance that is zero or not finite (a coordinate that did
    not move) keeps the target's. A dense estimate's correlations move linearly toward
    ``target_correlation`` (default: none, a diagonal target) with weight m / (m + c), where
    c = ``correlation_count`` and m counts the effective draws beyond ``correlations_after`` x d
    (none before: the correlations are then the target's). The result is a
    convex combination of a positive semi-definite and a positive definite correlation matrix, so
    the result is positive definite even when the effective count is below the dimension.
    """
    target_variances = np.diagonal(target) if target.ndim == 2 else target
    variances = np.diagonal(covariance) if covariance.ndim == 2 else covariance
    usable = np.isfinite(variances) & (variances > 0.0)
    weight = effective / (effective + variance_count)
    log_variances = np.log(target_variances)
    log_variances[usable] = weight * np.log(variances[usable]) + (1.0 - weight) * log_variances[
        usable
    ]
    result_variances = np.exp(log_variances)
    if covariance.ndim == 1:
        return result_variances
    scale = np.sqrt(np.where(usable, variances, 1.0))
    correlation = covariance / np.outer(scale, scale)
    correlation[~usable, :] = 0.0
    correlation[:, ~usable] = 0.0
    np.fill_diagonal(correlation, 1.0)
    if target_correlation is None:
        target_correlation = np.eye(len(variances))
    beyond = max(0.0, effective - correlations_after * len(variances))
    pull = beyond / (beyond + correlation_count)
    mixed = pull * correlation + (1.0 - pull) * target_correlation
    mixed = 0.5 * (mixed + mixed.T)
    root = np.sqrt(result_variances)
    return mixed * np.outer(root, root)


def correlation_of(covariance: np.ndarray) -> np.ndarray:
    """The correlation matrix of a dense metric (identity for a diagonal one)."""
    if covariance.ndim == 1:
        return np.eye(len(covariance))
    root = np.sqrt(np.diagonal(covariance))
    return covariance / np.outer(root, root)

