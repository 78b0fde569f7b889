"""PSIS-LOO: leave-one-out predictive accuracy from posterior draws of the pointwise log likelihood,
after Vehtari, Gelman & Gabry (2017), "Practical Bayesian model evaluation using leave-one-out
cross-validation and WAIC", Statistics and Computing 27 (section and equation numbers from memory).

For observation i the importance ratios of leaving it out are r_s = 1 / p(y_i | theta_s)
(section 2.1); PSIS smooths them, and elpd_loo,i = log(sum_s w_s p(y_i | theta_s)) with normalised
smoothed weights w (eq. 10). The effective number of parameters p_loo = lppd - elpd_loo, with
lppd_i = log mean_s p(y_i | theta_s) (eq. 3). Standard errors are sqrt(n) times the sample sd of
the pointwise values (eq. 23-24).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..approximation import psis

# Observations processed together: bounds the working memory to a few (draws x BLOCK) arrays
# whatever the number of observations; our choice, measured: 64 keeps the transposing copy out of
# the chains cache-friendly (64 x 4000 float64 is 2 MB).
BLOCK = 64


@dataclass(frozen=True)
class LeaveOneOut:
    """Pointwise and total PSIS-LOO results for one fit."""

    elpd_loo: float
    elpd_loo_se: float
    p_loo: float
    p_loo_se: float
    pointwise_elpd: np.ndarray       # (n,)
    pointwise_p: np.ndarray          # (n,)
    k_hat: np.ndarray                # (n,)
    effective_draws: np.ndarray      # (n,) PSIS effective sample size of each observation's weights
    draws: int
    k_threshold: float               # psis.k_threshold(draws)

    @property
    def observations(self) -> int:
        return int(self.pointwise_elpd.shape[0])

    def k_counts(self) -> dict[str, int]:
        """How many observations fall in each PSIS reliability class."""
        labels = [psis.reliability(float(k), self.draws) for k in self.k_hat]
        return {name: labels.count(name) for name in ("good", "ok", "unreliable", "unknown")}

    def flagged(self) -> list[int]:
        """0-based indices of observations whose k-hat is above the threshold, or has no fit."""
        bad = ~(self.k_hat < self.k_threshold)
        return [int(i) for i in np.flatnonzero(bad)]


def standard_error(pointwise: np.ndarray) -> float:
    """sqrt(n) times the sample sd (n - 1 divisor) of pointwise values (VGG 2017, eq. 23)."""
    n = pointwise.shape[0]
    if n < 2:
        return float("nan")
    return float(np.sqrt(n * np.var(pointwise, ddof=1)))


def psis_loo(chains: Sequence[np.ndarray]) -> LeaveOneOut:
    """PSIS-LOO from per-chain pointwise log likelihoods, each (draws_c, n) with the same n.

    The chains are read a block of observations at a time, so beyond the arrays given the memory
    used is O(total draws x BLOCK), never a second copy of everything.
    """
    if not chains:
        raise ValueError("no chains given")
    n = chains[0].shape[-1]
    if any(c.ndim != 2 or c.shape[-1] != n for c in chains):
        raise ValueError("every chain must be a (draws, observations) array with the same "
                         "number of observations")
    draws = sum(c.shape[0] for c in chains)
    elpd = np.empty(n)
    lppd = np.empty(n)
    k_hat = np.empty(n)
    effective = np.empty(n)
    buffer = np.empty((min(BLOCK, n), draws))
    for start in range(0, n, BLOCK):
        part = slice(start, min(start + BLOCK, n))
        # The block's log ratios -log p(y_i | theta_s), (observations, draws), gathered chain by
        # chain into one reused buffer: the only copy of the values made here.
        log_ratios = buffer[:part.stop - part.start]
        row = 0
        for chain in chains:
            np.negative(chain[:, part].T, out=log_ratios[:, row:row + chain.shape[0]])
            row += chain.shape[0]
        if not np.all(np.isfinite(log_ratios)):
            raise ValueError(f"a pointwise log likelihood among observations {start + 1}.."
                             f"{part.stop} is not finite")
        smoothed = psis.smooth(log_ratios)
        total = smoothed.log_weights - log_ratios
        top = np.max(total, axis=-1)
        elpd[part] = top + np.log(np.sum(np.exp(total - top[:, None]), axis=-1))
        # lppd_i = log mean_s p(y_i | theta_s), with the smallest ratio as the scale
        lowest = np.min(log_ratios, axis=-1)
        lppd[part] = -lowest + np.log(np.mean(np.exp(lowest[:, None] - log_ratios), axis=-1))
        k_hat[part] = smoothed.k_hat
        effective[part] = smoothed.effective_draws
    p = lppd - elpd
    return LeaveOneOut(
        elpd_loo=float(np.sum(elpd)), elpd_loo_se=standard_error(elpd),
        p_loo=float(np.sum(p)), p_loo_se=standard_error(p),
        pointwise_elpd=elpd, pointwise_p=p, k_hat=k_hat, effective_draws=effective,
        draws=draws, k_threshold=psis.k_threshold(draws))
