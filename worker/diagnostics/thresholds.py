"""Thresholds of the quality verdict: defaults, validation and resolution.

Defaults follow Vehtari et al. (2021) for R-hat (1.01) and ESS (400, i.e. 100 per chain with four
chains), Betancourt (2016) and common practice for E-BFMI (0.3), and zero divergences (a single
divergence means part of the posterior was not explored faithfully; common practice). A threshold
set to None switches its check off.

``max_depth_saturation`` is our own choice: the share of sampling iterations (all chains) whose
NUTS tree reached ``maximum_tree_depth`` may be at most 0.05. A capped trajectory is still a
valid transition, it just stops before the no-U-turn criterion would, so a few capped iterations
(a long trajectory now and then in a tail) cost little and the ESS checks see their effect; a
share above one in twenty is systematic (scales that differ by orders of magnitude, strong
correlations) and worth naming as the cause. Warning when many iterations hit the cap is
common practice.
"""

from __future__ import annotations

import math
from typing import Any

from worker.problems import InvalidSubmission, Problem, pointer

DEFAULT_THRESHOLDS: dict[str, float | int] = {
    "max_rhat": 1.01,
    "min_bulk_ess": 400,
    "min_tail_ess": 400,
    "max_divergences": 0,
    "min_ebfmi": 0.3,
    "max_depth_saturation": 0.05,
}

# the smallest value each threshold may take: R-hat cannot be below 1, the others below 0
LOWEST_ALLOWED: dict[str, float] = {
    "max_rhat": 1.0,
    "min_bulk_ess": 0.0,
    "min_tail_ess": 0.0,
    "max_divergences": 0.0,
    "min_ebfmi": 0.0,
    "max_depth_saturation": 0.0,
}
# thresholds that are shares of iterations, so at most 1
FRACTIONS = frozenset({"max_depth_saturation"})


def check_thresholds(checks: Any, root: str = "/checks") -> list[Problem]:
    """Every problem with a submission's ``checks`` member (None or absent means the defaults)."""
    if checks is None:
        return []
    if not isinstance(checks, dict):
        return [
            Problem(
                root or "/checks", "The checks must be an object of threshold names to numbers."
            )
        ]
    problems = []
    for name, value in checks.items():
        where = root + pointer(name)
        if name not in DEFAULT_THRESHOLDS:
            known = ", ".join(sorted(DEFAULT_THRESHOLDS))
            problems.append(
                Problem(where, f"Unknown check '{name}'; the known checks are {known}.")
            )
        elif value is None:
            continue
        elif (
            isinstance(value, bool)
            or not isinstance(value, int | float)
            or not math.isfinite(value)
        ):
            problems.append(
                Problem(where, f"The threshold '{name}' must be a finite number or null.")
            )
        elif value < LOWEST_ALLOWED[name]:
            problems.append(
                Problem(where, f"The threshold '{name}' must be at least {LOWEST_ALLOWED[name]:g}.")
            )
        elif name in FRACTIONS and value > 1:
            problems.append(
                Problem(where, f"The threshold '{name}' is a share of iterations: at most 1.")
            )
        elif name == "max_divergences" and value != int(value):
            problems.append(
                Problem(where, "The threshold 'max_divergences' must be a whole number.")
            )
    return problems


def resolve_thresholds(checks: dict | None) -> dict[str, float | int | None]:
    """Defaults overlaid with the given thresholds; raises InvalidSubmission if any is invalid."""
    problems = check_thresholds(checks)
    if problems:
        raise InvalidSubmission(problems)
    resolved: dict[str, float | int | None] = dict(DEFAULT_THRESHOLDS)
    resolved.update(checks or {})
    return resolved
