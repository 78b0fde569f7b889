"""Split R-hat: the classic form (BDA3 section 11.4) and the rank-normalised, folded form
(Vehtari, Gelman, Simpson, Carpenter & Buerkner 2021, section 4.2)."""

from __future__ import annotations

import numpy as np

from worker.diagnostics.ranks import fold, rank_normalize
from worker.diagnostics.splitting import as_batch, neutralize, split_chains, undefined_mask


def _rhat_of_split(split: np.ndarray) -> np.ndarray:
    """sqrt(var_plus / W) with var_plus = (n - 1) / n * W + B / n, for chains already split."""
    n = split.shape[2]
    within = split.var(axis=2, ddof=1).mean(axis=1)
    between_over_n = split.mean(axis=2).var(axis=1, ddof=1)
    var_plus = (n - 1.0) / n * within + between_over_n
    with np.errstate(divide="ignore", invalid="ignore"):
        # chains each stuck on a different value give W = 0 and B > 0: R-hat is +inf, rightly
        return np.sqrt(var_plus / within)


def classic_split_rhat_batch(x: np.ndarray) -> np.ndarray:
    """Split R-hat on the raw draws, without ranks or folding (BDA3 section 11.4)."""
    bad = undefined_mask(x)
    if bad.all():
        return np.full(x.shape[0], np.nan)
    result = _rhat_of_split(split_chains(neutralize(x, bad)))
    result[bad] = np.nan
    return result


def split_rhat_batch(x: np.ndarray) -> np.ndarray:
    """Maximum of bulk R-hat (rank-normalised split chains) and tail R-hat (the same, folded).

    Ranks make it insensitive to heavy tails; folding about the median makes chains that agree
    in location but not in scale visible (Vehtari et al. 2021, section 4.2).
    """
    bad = undefined_mask(x)
    if bad.all():
        return np.full(x.shape[0], np.nan)
    split = split_chains(neutralize(x, bad))
    bulk = _rhat_of_split(rank_normalize(split))
    tail = _rhat_of_split(rank_normalize(fold(split)))
    # Folded draws can be constant when the draws are not: a 0/1 quantity with exactly as many
    # ones as zeros has median 1/2, and every draw lies 1/2 from it. The tail R-hat is then 0/0
    # and says nothing, so the bulk R-hat alone decides (fmax skips a NaN).
    result = np.fmax(bulk, tail)
    result[bad] = np.nan
    return result


def split_rhat(x: np.ndarray) -> float:
    """Rank-normalised split R-hat of one quantity's ``(chains, draws)`` array; NaN if undefined."""
    return float(split_rhat_batch(as_batch(x))[0])


def classic_split_rhat(x: np.ndarray) -> float:
    """Classic split R-hat of one quantity's ``(chains, draws)`` array; NaN if undefined."""
    return float(classic_split_rhat_batch(as_batch(x))[0])
