"""Effective sample sizes: basic, bulk and tail (Vehtari et al. 2021, sections 3.2 and 4.3).

Each ``*_batch`` function takes ``(quantities, chains, draws)`` and returns one value per
quantity, NaN where the value is undefined (see ``splitting.undefined_mask``). The one-quantity
functions of the contract take ``(chains, draws)`` and return a float.
"""

from __future__ import annotations

import numpy as np

from worker.diagnostics.autocorrelation import combined_autocorrelation, integrated_time
from worker.diagnostics.ranks import rank_normalize
from worker.diagnostics.splitting import (
    MIN_DRAWS_PER_CHAIN,
    as_batch,
    neutralize,
    split_chains,
    undefined_mask,
)

TAIL_PROBABILITIES = (0.05, 0.95)


def _ess_of_split(split: np.ndarray) -> np.ndarray:
    """ESS of chains that are already split; NaN where the split chains are undefined."""
    _, m, n = split.shape
    total = m * n
    bad = undefined_mask(split, min_draws=MIN_DRAWS_PER_CHAIN // 2)
    if bad.all():
        return np.full(split.shape[0], np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        tau = integrated_time(combined_autocorrelation(neutralize(split, bad)))
    # Vehtari et al. (2021) bound tau below by 1 / log10(S) so that antithetic chains cannot claim
    # an effective sample size above S * log10(S).
    tau = np.maximum(tau, 1.0 / np.log10(total))
    result = total / tau
    result[bad] = np.nan
    return result


def _guarded(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    bad = undefined_mask(x)
    return bad, neutralize(x, bad)


def ess_batch(x: np.ndarray) -> np.ndarray:
    """Basic ESS of split chains without rank normalisation: the one that governs the mean."""
    bad, safe = _guarded(x)
    if bad.all():
        return np.full(x.shape[0], np.nan)
    result = _ess_of_split(split_chains(safe))
    result[bad] = np.nan
    return result


def bulk_ess_batch(x: np.ndarray) -> np.ndarray:
    """ESS of the rank-normalised split chains, robust to heavy tails."""
    bad, safe = _guarded(x)
    if bad.all():
        return np.full(x.shape[0], np.nan)
    result = _ess_of_split(rank_normalize(split_chains(safe)))
    result[bad] = np.nan
    return result


def quantile_ess_batch(x: np.ndarray, p: float) -> np.ndarray:
    """ESS of the indicator I(x <= q_p) for every quantity: the ESS that governs the p-quantile.

    An indicator that is constant (a quantile at the edge of a discrete support) has no ESS.
    """
    bad, safe = _guarded(x)
    q = x.shape[0]
    if bad.all():
        return np.full(q, np.nan)
    cut = np.quantile(safe.reshape(q, -1), p, axis=1)
    indicator = (safe <= cut[:, None, None]).astype(np.float64)
    result = _ess_of_split(split_chains(indicator))
    result[bad] = np.nan
    return result


def tail_ess_batch(x: np.ndarray) -> np.ndarray:
    """Minimum of the 5% and 95% quantile ESS, over those that are defined.

    A discrete quantity can have one constant quantile indicator (a 0/1 quantity has 95% quantile
    1, and I(x <= 1) is always true) and a varying one; the varying one still measures mixing, so
    a NaN does not hide it (fmin skips a NaN). Both undefined gives NaN.
    """
    lower, upper = (quantile_ess_batch(x, p) for p in TAIL_PROBABILITIES)
    return np.fmin(lower, upper)


def ess(x: np.ndarray) -> float:
    """Basic ESS of one quantity's ``(chains, draws)`` array."""
    return float(ess_batch(as_batch(x))[0])


def bulk_ess(x: np.ndarray) -> float:
    """Bulk-ESS of one quantity's ``(chains, draws)`` array."""
    return float(bulk_ess_batch(as_batch(x))[0])


def tail_ess(x: np.ndarray) -> float:
    """Tail-ESS of one quantity's ``(chains, draws)`` array."""
    return float(tail_ess_batch(as_batch(x))[0])


def quantile_ess(x: np.ndarray, p: float) -> float:
    """ESS of the p-quantile of one quantity's ``(chains, draws)`` array."""
    return float(quantile_ess_batch(as_batch(x), p)[0])
