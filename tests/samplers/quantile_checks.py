"""Checks of long runs against known quantiles and standard deviations, Bonferroni-corrected.

Each check compares an estimate from draws with its exact value and divides the difference by a
batch-means standard error (tests/samplers/batch_means.py, kept apart from worker.diagnostics):

- a probability check at level p: the share of draws at or below the exact p-quantile q_p,
  against p;
- an sd check: the sd of the draws against the exact sd, with se(sd) = se(var) / (2 sd) by the
  delta method (common practice).

All checks of one test form one family: each is held at the two-sided level FAMILY_LEVEL / m for
m checks (Bonferroni 1936; common practice), so the test as a whole fails by chance with
probability at most FAMILY_LEVEL. ``scale_power_z`` gives the z-score a 2 % error in the
standard deviation would produce, so each test can assert it has the power it claims.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from tests.samplers.batch_means import batch_means_se

FAMILY_LEVEL = 0.01
SD_ERROR = 0.02  # the error in a standard deviation every sampler test must be able to see
POWER_Z = stats.norm.ppf(0.99)  # a test must detect that error with probability >= 0.99


@dataclass(frozen=True)
class Check:
    label: str
    estimate: float
    expected: float
    se: float
    # How far (in se) the estimate moves when every draw is scaled by 1 + SD_ERROR about the
    # distribution's centre: the size of the signal a 2 % error in the sd produces.
    shift_per_scale_error: float

    @property
    def z(self) -> float:
        return (self.estimate - self.expected) / self.se if self.se > 0 else np.inf


def probability_checks(
    label: str,
    draws: np.ndarray,
    truth: stats.rv_continuous,
    probabilities: tuple[float, ...],
    centre: float,
) -> list[Check]:
    """Checks of P(x <= q_p) = p for ``draws`` (chains, draws[, pooled coordinates]).

    Pooled coordinates (a trailing axis) share one indicator per draw: the mean over them, so
    their dependence is inside the batch means. A 2 % scale error about ``centre`` moves the
    share at q_p by about f(q_p) |q_p - centre| SD_ERROR (first order; f the exact density).
    """
    checks = []
    for p in probabilities:
        q = float(truth.ppf(p))
        below = (draws <= q).astype(np.float64)
        if below.ndim == 3:
            below = below.mean(axis=2)
        se = batch_means_se(below)
        signal = float(truth.pdf(q)) * abs(q - centre) * SD_ERROR
        checks.append(Check(f"{label} P(<= q{p:g})", float(below.mean()), p, se, signal / se))
    return checks


def sd_check(label: str, draws: np.ndarray, sd: float) -> Check:
    """The sd of ``draws`` (chains, draws) against the exact ``sd``."""
    centred_sq = (draws - draws.mean()) ** 2
    estimate = float(np.sqrt(centred_sq.mean()))
    se = batch_means_se(centred_sq) / (2.0 * estimate)
    return Check(f"{label} sd", estimate, sd, se, SD_ERROR * sd / se)


def critical_z(checks: list[Check]) -> float:
    """The two-sided Bonferroni critical value for the family of ``checks``."""
    return float(stats.norm.isf(FAMILY_LEVEL / (2 * len(checks))))


def failures(checks: list[Check]) -> list[str]:
    """Every check beyond the family's critical value, described."""
    limit = critical_z(checks)
    return [
        f"{c.label}: {c.estimate:.5g} vs {c.expected:.5g} (se {c.se:.3g}, z {c.z:+.2f}, "
        f"limit {limit:.2f})"
        for c in checks
        if not abs(c.z) <= limit
    ]


def power_shortfall(checks: list[Check]) -> str | None:
    """None when the strongest check would see a 2 % sd error with probability >= 0.99.

    Power of a two-sided z-test at critical value c for a true shift s (in se): about
    Phi(s - c); it is >= 0.99 when s >= c + 2.33.
    """
    needed = critical_z(checks) + POWER_Z
    best = max(checks, key=lambda c: c.shift_per_scale_error)
    if best.shift_per_scale_error >= needed:
        return None
    return (
        f"too little power: a 2 % sd error moves the strongest check ({best.label}) by "
        f"{best.shift_per_scale_error:.2f} se, below the {needed:.2f} needed"
    )


def scaled(draws: np.ndarray, centre: float, factor: float) -> np.ndarray:
    """``draws`` moved away from (factor > 1) or toward ``centre``: a sampler with a scale error."""
    return centre + factor * (draws - centre)
