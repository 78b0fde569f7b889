"""Helpers shared by the validation tests: sampler budgets, runs through the runner, and the
"within k Monte Carlo standard errors" comparison against reference values."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from worker import runner
from worker.diagnostics import summarize

METHODS = ("nuts", "hmc", "metropolis")
TOLERANCE_MCSE = 4.0
PROBABILITIES = {"5%": 0.05, "50%": 0.5, "95%": 0.95}
# The runs ask for a 90% central interval, so the summary's median and interval end points are
# the 50%, 5% and 95% quantiles compared here.
INTERVAL = 0.9
SUMMARY_POINTS = {"5%": "lower", "50%": "median", "95%": "upper"}

# Modest budgets so the directory runs in a few minutes; random-walk Metropolis needs more draws
# for the same effective sample size (Roberts, Gelman & Gilks 1997: its efficiency falls as 1/d).
BUDGETS = {
    "nuts": {"chains": 4, "warmup_iterations": 500, "draws": 1000},
    "hmc": {"chains": 4, "warmup_iterations": 500, "draws": 1000},
    "metropolis": {"chains": 4, "warmup_iterations": 1000, "draws": 4000},
}


def run(spec: dict, data: dict, method: str, seed: int, **sampler) -> dict:
    """Run a spec through ``runner.run_in_process`` with the method's budget."""
    settings = {"method": method, "seed": seed, **BUDGETS[method], **sampler}
    body = {"model": spec, "data": data, "sampler": settings, "summary": {"interval": INTERVAL}}
    return runner.run_in_process(body)


def record_of(outcome: dict, name: str) -> dict:
    return next(r for r in outcome["summary"] if r["name"] == name)


def column(outcome: dict, name: str) -> np.ndarray:
    """One quantity's draws, (chains, draws)."""
    return outcome["draws"][:, :, outcome["names"].index(name)]


def summary_of(draws: np.ndarray, name: str = "quantity") -> dict:
    """The summary record of a (chains, draws) array computed in the test (e.g. a transform)."""
    return summarize(draws[:, :, None], [name], INTERVAL)[0]


def mismatches(record: dict, truth: Mapping[str, float], k: float = TOLERANCE_MCSE) -> list[str]:
    """Every statistic of ``record`` further than k of its MCSE from ``truth``.

    ``truth`` holds any of "mean", "sd" and quantile labels ("5%", "50%", "95%").
    """
    found = []
    pairs = []
    if "mean" in truth:
        pairs.append(("mean", record["mean"], record["mean_error"], truth["mean"]))
    if "sd" in truth:
        pairs.append(("sd", record["sd"], record["sd_error"], truth["sd"]))
    for label, point in SUMMARY_POINTS.items():
        if label in truth:
            estimate = record["median"] if point == "median" else record["interval"][point]
            pairs.append((label, estimate, record["quantile_errors"][point], truth[label]))
    for what, estimate, mcse, expected in pairs:
        if estimate is None or mcse is None or not abs(estimate - expected) <= k * mcse:
            found.append(
                f"{record['name']} {what}: estimate {estimate} vs reference {expected:.6g} "
                f"(MCSE {mcse})"
            )
    return found


def from_scipy(distribution) -> dict[str, float]:
    """Mean, sd and the 5/50/95% quantiles of a frozen scipy.stats distribution."""
    truth = {"mean": float(distribution.mean()), "sd": float(distribution.std())}
    truth.update({label: float(distribution.ppf(p)) for label, p in PROBABILITIES.items()})
    return truth
