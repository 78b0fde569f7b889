"""Comparing fits on the same data by their PSIS-LOO expected log predictive density.

Vehtari, Gelman & Gabry (2017), section 5.2 (from memory): the difference of two fits' elpd_loo is
the sum of the pointwise differences, and its standard error is sqrt(n) times the sd of those
pointwise differences (the pairing removes the variation the fits share), which is why the
difference's error is not the two fits' errors combined.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .loo import LeaveOneOut, standard_error

# A difference smaller than this many standard errors is not read as a preference; our choice of
# the usual two-sided normal reading (about 95%), with the paper's warning that the normal
# approximation is itself rough when differences are small or n is small.
SEPARATION = 2.0
# Below this the standard error of the difference is too uncertain to lean on; our choice
# (VGG 2017 discuss the SE's poor calibration for small n without fixing a number).
SMALL_N = 100


@dataclass(frozen=True)
class RankedFit:
    name: str
    elpd_loo: float
    elpd_loo_se: float
    p_loo: float
    elpd_difference: float      # this fit minus the best (0 for the best, negative otherwise)
    difference_se: float        # paired standard error of that difference (0 for the best)
    flagged_observations: int   # observations with k-hat above the threshold


@dataclass(frozen=True)
class Comparison:
    ranked: list[RankedFit]
    cautions: list[str]


def compare(fits: Mapping[str, LeaveOneOut]) -> Comparison:
    """Order fits by elpd_loo (best first) with paired differences to the best; ValueError when
    fewer than two fits or when their observation counts differ."""
    if len(fits) < 2:
        raise ValueError("a comparison needs at least two fits")
    counts = {fit.observations for fit in fits.values()}
    if len(counts) != 1:
        raise ValueError("the fits have different numbers of observations, so they were not "
                         "fitted to the same data")
    order = sorted(fits, key=lambda name: fits[name].elpd_loo, reverse=True)
    best = fits[order[0]]
    ranked: list[RankedFit] = []
    cautions: list[str] = []
    for name in order:
        fit = fits[name]
        difference = fit.pointwise_elpd - best.pointwise_elpd
        se = 0.0 if name == order[0] else standard_error(difference)
        flagged = len(fit.flagged())
        ranked.append(RankedFit(name, fit.elpd_loo, fit.elpd_loo_se, fit.p_loo,
                                float(np.sum(difference)), se, flagged))
        if name != order[0] and abs(float(np.sum(difference))) < SEPARATION * se:
            cautions.append(
                f"'{name}' is within {SEPARATION:g} standard errors of '{order[0]}': the data do "
                "not separate them, and a small difference is not evidence for either")
        if flagged:
            cautions.append(
                f"'{name}' has {flagged} observation(s) with Pareto k-hat above "
                f"{fit.k_threshold:.2f}: its elpd_loo is unreliable there (refit without those "
                "observations, or use a model more robust to them)")
    n = best.observations
    if n < SMALL_N:
        cautions.append(f"only {n} observations: the standard errors of the differences are "
                        "themselves uncertain")
    cautions.append("predictive accuracy compares the fits with each other; it does not show "
                    "that the best one is right, and decisions that matter need qualified review")
    return Comparison(ranked, cautions)
