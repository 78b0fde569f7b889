"""Monte Carlo standard errors of the posterior mean, sd and quantiles.

Mean: sd / sqrt(ESS) with the basic ESS of the draws (BDA3 section 11.5; common practice).
Sd: delta method. With s^2 the mean of squared deviations, Var(s^2) ~ Var((x - mu)^2) / ESS_sq,
where ESS_sq is the basic ESS of the squared deviations, and d s / d s^2 = 1 / (2 s); for iid
normal draws this reduces to the textbook sigma / sqrt(2 N) (our derivation).
Quantiles: Vehtari et al. (2021), section 4.3 (from memory): the ESS of the indicator
I(x <= q_p) gives a Beta(S_eff p + 1, S_eff (1 - p) + 1) distribution for the probability level
actually hit; its 15.9% and 84.1% points (one normal sd either side) are mapped back through the
pooled draws, and half the width of that interval is the standard error.
"""

from __future__ import annotations

import numpy as np
from scipy import special, stats

from worker.diagnostics.ess import ess_batch, quantile_ess_batch
from worker.diagnostics.splitting import as_batch

ONE_SD_BELOW = float(special.ndtr(-1.0))
ONE_SD_ABOVE = float(special.ndtr(1.0))


def mean_error_batch(x: np.ndarray) -> np.ndarray:
    """MCSE of the mean of each quantity of a ``(q, chains, draws)`` batch."""
    q = x.shape[0]
    sd = x.reshape(q, -1).std(axis=1, ddof=1)
    return sd / np.sqrt(ess_batch(x))


def sd_error_batch(x: np.ndarray) -> np.ndarray:
    """MCSE of the sd of each quantity of a ``(q, chains, draws)`` batch."""
    q = x.shape[0]
    flat = x.reshape(q, -1)
    mean = flat.mean(axis=1)
    squared = (x - mean[:, None, None]) ** 2
    variance = squared.reshape(q, -1).mean(axis=1)
    var_of_squared = squared.reshape(q, -1).var(axis=1, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        mcse_variance = np.sqrt(var_of_squared / ess_batch(squared))
        return mcse_variance / (2.0 * np.sqrt(variance))


def quantile_error_batch(x: np.ndarray, p: float, s_eff: np.ndarray | None = None) -> np.ndarray:
    """MCSE of the p-quantile of each quantity of a ``(q, chains, draws)`` batch.

    ``s_eff`` is the quantile's indicator ESS when the caller already has it.
    """
    q = x.shape[0]
    if s_eff is None:
        s_eff = quantile_ess_batch(x, p)
    ok = np.isfinite(s_eff)
    a = np.where(ok, s_eff, 1.0) * p + 1.0
    b = np.where(ok, s_eff, 1.0) * (1.0 - p) + 1.0
    low = stats.beta.ppf(ONE_SD_BELOW, a, b)
    high = stats.beta.ppf(ONE_SD_ABOVE, a, b)
    flat = np.sort(x.reshape(q, -1), axis=1)
    size = flat.shape[1]
    rows = np.arange(q)
    # probability level -> position in the sorted pooled draws, clipped to the sample's ends
    low_index = np.clip(np.floor(low * size).astype(int), 0, size - 1)
    high_index = np.clip(np.ceil(high * size).astype(int) - 1, 0, size - 1)
    result = (flat[rows, high_index] - flat[rows, low_index]) / 2.0
    return np.where(ok, result, np.nan)


def mean_error(x: np.ndarray) -> float:
    """MCSE of the mean of one quantity's ``(chains, draws)`` array."""
    return float(mean_error_batch(as_batch(x))[0])


def sd_error(x: np.ndarray) -> float:
    """MCSE of the sd of one quantity's ``(chains, draws)`` array."""
    return float(sd_error_batch(as_batch(x))[0])


def quantile_error(x: np.ndarray, p: float) -> float:
    """MCSE of the p-quantile of one quantity's ``(chains, draws)`` array."""
    return float(quantile_error_batch(as_batch(x), p)[0])
