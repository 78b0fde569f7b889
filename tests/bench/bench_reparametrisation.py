"""The QR reparametrisation of X @ beta on a raw, collinear regression, on and off side by side.

Data: Longley (1967), shipped by statsmodels, raw (a column of ones and the six covariates;
condition number about 5e9), p(beta, sigma) ∝ 1/sigma as in tests/validation/test_regression.py.
Both arms use the default NUTS settings and the same seed: with the reparametrisation a full
default job (4 chains x (1000 + 1000)); without it one chain of the same length (the full job
takes minutes and does not converge, issue 11). Printed: process CPU time, gradient evaluations per
iteration, the share of draws at the tree-depth limit, and for the reparametrised job the smallest
bulk-ESS of the coefficients per CPU second and the largest |posterior mean - certified| in MCSE.
"""

from __future__ import annotations

import time

import numpy as np
from statsmodels.datasets import longley

from worker import runner

# NIST StRD Longley certified coefficients (from memory; statsmodels' OLS reproduces them, which
# tests/validation/test_regression.py checks)
CERTIFIED = np.array([-3482258.63459582, 15.0618722713733, -0.358191792925910e-01,
                      -2.02022980381683, -1.03322686717359, -0.511041056535807e-01,
                      1829.15146461355])
# the arm without the reparametrisation: one chain of the default length (the full job takes
# minutes)
OFF_WARMUP, OFF_DRAWS = 1000, 1000
SPEC = {
    "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
               "X": {"type": "real", "shape": ["n", "k"]}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"beta": {"shape": ["k"], "flat_prior": True},
                 "log_sigma": {"flat_prior": True}},
    "derived": {"sigma": "exp(log_sigma)"},
    "likelihood": [{"name": "employment", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "X @ beta", "scale": "sigma"}}],
}  # fmt: skip


def _job(reparametrise: bool, **sampler) -> tuple[dict, float]:
    frame = longley.load_pandas()
    design = np.column_stack([np.ones(16), frame.exog.to_numpy(dtype=float)])
    data = {"n": 16, "k": 7, "X": design.tolist(),
            "y": frame.endog.to_numpy(dtype=float).tolist()}
    body = {"model": SPEC, "data": data,
            "sampler": {"seed": 1967, "reparametrise": reparametrise, **sampler}}
    started = time.process_time()
    outcome = runner.run_in_process(body)
    return outcome, time.process_time() - started


def _gradients_per_iteration(outcome: dict) -> float:
    counts = outcome["sampler"]["gradient_evaluations_per_chain"]
    iterations = sum(outcome["settings"]["warmup_iterations"] + outcome["settings"]["draws"]
                     for _ in counts)
    return sum(c["warmup"] + c["sampling"] for c in counts) / iterations


def main() -> None:
    on, on_cpu = _job(True)
    off, off_cpu = _job(False, chains=1, warmup_iterations=OFF_WARMUP, draws=OFF_DRAWS)
    records = on["summary"][:7]
    ess = min(r["bulk_ess"] for r in records)
    worst = max(abs(r["mean"] - c) / r["mean_error"] for r, c in zip(records, CERTIFIED,
                                                                     strict=True))
    per_on, per_off = _gradients_per_iteration(on), _gradients_per_iteration(off)
    print(f"raw Longley, QR on : 4 x (1000 + 1000) in {on_cpu:.1f} s CPU, "
          f"{per_on:.1f} gradients/iteration, min bulk-ESS {ess:.0f} "
          f"({ess / on_cpu:.0f} per CPU s), max |mean - certified| {worst:.1f} MCSE", flush=True)
    depth = off["sampler"]["tree_depth_hits"] / OFF_DRAWS
    print(f"raw Longley, QR off: 1 x ({OFF_WARMUP} + {OFF_DRAWS}) in {off_cpu:.1f} s CPU, "
          f"{per_off:.1f} gradients/iteration, {depth:.0%} of draws at the depth limit",
          flush=True)
    print(f"gradients per iteration, off / on: {per_off / per_on:.0f}; CPU per iteration, "
          f"off / on: {(off_cpu / (OFF_WARMUP + OFF_DRAWS)) / (on_cpu / 8000):.0f}", flush=True)
