"""Pareto smoothed importance sampling (PSIS): Vehtari, Simpson, Gelman, Yao & Gabry (2024),
"Pareto smoothed importance sampling", JMLR 25.

Given log importance ratios log r_s = log p(theta_s) - log g(theta_s) (up to a constant), the
largest M ratios are replaced by the expected order statistics of a generalized Pareto
distribution fitted to them, and the fitted shape k-hat says how far the estimate can be trusted.
Section and equation references below are to the 2024 paper and are from memory.

Every function here works on a batch: the last axis holds the S draws, the leading axes are
independent problems (observations, for leave-one-out), so nothing loops over rows in Python.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Zhang & Stephens (2009, "A new and efficient estimation method for the generalized Pareto
# distribution", Technometrics 51(3), section 3): the profile-likelihood quadrature uses
# m = 20 + floor(sqrt(n)) points (from memory).
GRID_BASE = 20
# PSIS 2024, section 3: a weakly informative prior on k centred at 0.5, worth 10 observations,
# k_post = (M k_hat + 10 * 0.5) / (M + 10) (from memory).
PRIOR_K = 0.5
PRIOR_WEIGHT = 10.0
# Fewer tail draws than this and no Pareto fit is attempted; our choice (a five-point tail says
# nothing about a shape parameter), reported as k-hat NaN.
MINIMUM_TAIL = 5
# PSIS 2024, section 3 (with Vehtari, Gelman & Gabry 2017): k-hat below 0.5 means the raw ratios
# have a finite variance; 0.7 is the largest k-hat at which PSIS estimates are still reliable with
# practical sample sizes.
GOOD_K = 0.5
PRACTICAL_K = 0.7


def tail_length(draws: int) -> int:
    """M = min(0.2 S, 3 sqrt(S)), rounded up (PSIS 2024, section 3)."""
    return int(np.ceil(min(0.2 * draws, 3.0 * np.sqrt(draws))))


def k_threshold(draws: int) -> float:
    """The sample-size-dependent threshold min(1 - 1/log10(S), 0.7): PSIS 2024, section 3 (from
    memory), the largest k-hat for which S draws give a usable estimate."""
    if draws <= 10:
        return 0.0
    return float(min(1.0 - 1.0 / np.log10(draws), PRACTICAL_K))


@dataclass(frozen=True)
class ParetoFit:
    """Generalized Pareto fits, one per leading index: shape k (> 0 is a heavy tail) and scale."""

    k: np.ndarray
    sigma: np.ndarray


def fit_generalized_pareto(exceedances: np.ndarray) -> ParetoFit:
    """Zhang & Stephens (2009) posterior-mean estimator on the last axis, with the PSIS prior on k.

    exceedances: (..., n), each row ascending and non-negative (values above the threshold).
    Zhang & Stephens write the density as sigma^-1 (1 - k x / sigma)^(1/k - 1); with
    theta = k / sigma the profile log likelihood is l(theta) = n (log(theta / k(theta)) + k(theta)
    - 1), k(theta) = -mean(log(1 - theta x)). The estimate of theta is the average of a grid of
    theta values weighted by exp(l), the grid spread by their empirical prior; the usual shape
    (positive = heavy tail) is xi = -k.
    """
    x = np.asarray(exceedances, dtype=float)
    n = x.shape[-1]
    m = GRID_BASE + int(np.floor(np.sqrt(n)))
    largest = x[..., -1:]
    quartile = x[..., max(int(np.floor(n / 4 + 0.5)) - 1, 0)][..., None]
    j = np.arange(1, m + 1, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        theta = 1.0 / largest + (1.0 - np.sqrt(m / (j - 0.5))) / (3.0 * quartile)  # (..., m)
        # k(theta) for each grid point: -mean over the sample of log1p(-theta x), in one buffer.
        # Single precision here only: its relative error of 1e-7 moves the profile by about
        # n * 1e-7, far below the differences between grid points, and it halves the cost of
        # the largest array in PSIS-LOO; theta-hat and k-hat are then computed in double.
        grid = np.multiply(-theta[..., :, None], x[..., None, :], dtype=np.float32)
        np.log1p(grid, out=grid)
        k_of_theta = -np.mean(grid, axis=-1, dtype=np.float64)
        profile = n * (np.log(theta / k_of_theta) + k_of_theta - 1.0)
    profile = np.where(np.isfinite(profile), profile, -np.inf)
    top = np.max(profile, axis=-1, keepdims=True)
    weights = np.exp(profile - top)
    weights /= np.sum(weights, axis=-1, keepdims=True)
    theta_hat = np.sum(weights * np.where(np.isfinite(theta), theta, 0.0), axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        xi = np.mean(np.log1p(-theta_hat[..., None] * x), axis=-1)
        sigma = -xi / theta_hat
    xi = (n * xi + PRIOR_WEIGHT * PRIOR_K) / (n + PRIOR_WEIGHT)
    return ParetoFit(k=xi, sigma=sigma)


def pareto_quantiles(p: np.ndarray, fit: ParetoFit) -> np.ndarray:
    """Quantiles of the fitted generalized Pareto (threshold 0) at probabilities p (last axis)."""
    k = fit.k[..., None]
    sigma = fit.sigma[..., None]
    with np.errstate(divide="ignore", invalid="ignore"):
        general = sigma / k * np.expm1(-k * np.log1p(-p))
    exponential = -sigma * np.log1p(-p)
    return np.where(np.abs(k) < 1e-12, exponential, general)


@dataclass(frozen=True)
class Smoothed:
    """PSIS results per leading index: normalised log weights over the last axis, k-hat, and the
    effective sample size 1 / sum(w^2) of the normalised smoothed weights (PSIS 2024, eq. for
    S_eff; from memory)."""

    log_weights: np.ndarray
    k_hat: np.ndarray
    effective_draws: np.ndarray


# Rows smoothed together: large enough to vectorise, small enough that the Zhang & Stephens grid
# (rows x m x M values) stays in cache; measured, our choice.
BLOCK_ROWS = 128


def smooth(log_ratios: np.ndarray) -> Smoothed:
    """PSIS on the last axis of log_ratios (..., S); -inf entries are allowed (zero weight)."""
    log_r = np.asarray(log_ratios, dtype=float)
    draws = log_r.shape[-1]
    lead = log_r.shape[:-1]
    rows = log_r.reshape(-1, draws)
    log_w = np.empty_like(rows)
    k_hat = np.full(rows.shape[0], np.nan)
    effective = np.empty(rows.shape[0])
    for start in range(0, rows.shape[0], BLOCK_ROWS):
        part = slice(start, start + BLOCK_ROWS)
        log_w[part], k_hat[part], effective[part] = _smooth_rows(rows[part])
    return Smoothed(log_weights=log_w.reshape(*lead, draws), k_hat=k_hat.reshape(lead),
                    effective_draws=effective.reshape(lead))


def _smooth_rows(log_r: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Normalised smoothed log weights, k-hat and effective sample size for a (rows, S) block."""
    draws = log_r.shape[-1]
    # Work with ratios scaled by their maximum, so exp never overflows (the scale cancels).
    top = np.max(log_r, axis=-1, keepdims=True)
    with np.errstate(invalid="ignore"):  # -inf - -inf in a row of zero ratios: handled below
        shifted = log_r - top
    if not np.all(np.isfinite(top)):
        # A row with +inf or NaN ratios (the maximum shows both): no usable weight there.
        shifted[np.isnan(shifted)] = -np.inf
    m = min(tail_length(draws), draws - 1)
    k_hat = np.full(shifted.shape[0], np.nan)
    if m >= MINIMUM_TAIL:
        # The tail: the M largest ratios, and the threshold just below them (PSIS 2024, section 3).
        order = np.argpartition(shifted, draws - m - 1, axis=-1)[:, draws - m - 1:]
        block = np.take_along_axis(shifted, order, axis=-1)
        inner = np.argsort(block, axis=-1)
        order = np.take_along_axis(order, inner, axis=-1)
        block = np.take_along_axis(block, inner, axis=-1)
        threshold = np.exp(block[:, :1])
        tail = np.exp(block[:, 1:])
        usable = np.isfinite(block[:, 0]) & (tail[:, -1] > threshold[:, 0])
        if np.any(usable):
            fit = fit_generalized_pareto(tail[usable] - threshold[usable])
            p = (np.arange(1, m + 1) - 0.5) / m
            replaced = threshold[usable] + pareto_quantiles(p[None, :], fit)
            # Truncate at the largest raw ratio (PSIS 2024, section 3): never above max r_s = 1.
            replaced = np.minimum(replaced, 1.0)
            rows = np.flatnonzero(usable)
            with np.errstate(divide="ignore"):
                shifted[rows[:, None], order[usable, 1:]] = np.log(replaced)
            k_hat[usable] = fit.k
    # Every entry is at most 0 (scaled by the largest raw ratio, the tail truncated there), so
    # one exp serves the normaliser and the effective sample size without overflow.
    scaled = np.exp(shifted)
    total = np.sum(scaled, axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        effective = total * total / np.sum(scaled * scaled, axis=-1)
        log_w = shifted - np.log(total)[:, None]
    # A row with no usable ratio at all has no weights: -inf everywhere, no effective draws.
    empty = total == 0
    log_w[empty] = -np.inf
    effective[empty] = 0.0
    return log_w, k_hat, effective


def reliability(k_hat: float, draws: int) -> str:
    """The PSIS 2024 reading of one k-hat: "good" (below 0.5, finite variance of the raw ratios),
    "ok" (below the sample-size threshold), "unreliable" (above it) or "unknown" (no fit)."""
    if not np.isfinite(k_hat):
        return "unknown"
    if k_hat < GOOD_K:
        return "good"
    if k_hat < k_threshold(draws):
        return "ok"
    return "unreliable"
