"""The QR reparametrisation of X @ beta on a raw, collinear regression, on and off side by side.

Data: Longley (1967), shipped by statsmodels, raw (a column of ones and the six covariates;
condition number about 5e9), p(beta, sigma) ∝ 1/sigma as in tests/validation/test_regression.py.
Both arms use the default NUTS settings and the same seed: with the reparametrisation a full
default job (4 chains x (1000 + 1000)); without it one chain, stopped after 30 s of CPU time (the
full job takes minutes and does not converge, issue 11). Printed: process CPU time, gradient
evaluations per iteration, the share of iterations at the tree-depth limit, and for the
reparametrised job the smallest bulk-ESS of the coefficients per CPU second and the largest
|posterior mean - certified| in MCSE.
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
# the arm without the reparametrisation runs one default chain until this much process CPU time
# has passed (its full job takes minutes); the reparametrised job needs about 5 s in all
OFF_BUDGET_SECONDS = 30.0
MAXIMUM_DEPTH = 10  # the default maximum_tree_depth
SPEC = {
    "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
               "X": {"type": "real", "shape": ["n", "k"]}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"beta": {"shape": ["k"], "flat_prior": True},
                 "log_sigma": {"flat_prior": True}},
    "derived": {"sigma": "exp(log_sigma)"},
    "likelihood": [{"name": "employment", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "X @ beta", "scale": "sigma"}}],
}  # fmt: skip


def _body(reparametrise: bool) -> dict:
    frame = longley.load_pandas()
    design = np.column_stack([np.ones(16), frame.exog.to_numpy(dtype=float)])
    data = {"n": 16, "k": 7, "X": design.tolist(),
            "y": frame.endog.to_numpy(dtype=float).tolist()}
    return {"model": SPEC, "data": data,
            "sampler": {"seed": 1967, "reparametrise": reparametrise}}


def _reparametrised_job() -> tuple[dict, float]:
    started = time.process_time()
    outcome = runner.run_in_process(_body(True))
    return outcome, time.process_time() - started


def _unreparametrised_chain() -> tuple[int, float, float, float]:
    """Iterations done within the budget, CPU seconds, gradients per iteration, share of
    iterations at the depth limit."""
    body = _body(False)
    body["sampler"] = {k: v for k, v in runner.resolve_sampler(body["sampler"]).items()
                       if v is not None}
    started = time.process_time()
    chain = runner.start_chain(body, 0)
    result = chain.run(should_stop=lambda: time.process_time() - started > OFF_BUDGET_SECONDS)
    cpu = time.process_time() - started
    depths = np.concatenate([np.asarray(result.warmup_stats.get("doublings", [])),
                             np.asarray(result.stats.get("doublings", []))])
    gradients = sum(result.evaluations.gradient.values())
    at_limit = float(np.mean(depths >= MAXIMUM_DEPTH))
    return len(depths), cpu, gradients / max(len(depths), 1), at_limit


def main() -> None:
    on, on_cpu = _reparametrised_job()
    records = on["summary"][:7]
    ess = min(r["bulk_ess"] for r in records)
    worst = max(abs(r["mean"] - c) / r["mean_error"] for r, c in zip(records, CERTIFIED,
                                                                     strict=True))
    counts = on["sampler"]["gradient_evaluations_per_chain"]
    per_on = sum(c["warmup"] + c["sampling"] for c in counts) / (4 * 2000)
    print(f"raw Longley, QR on : 4 x (1000 + 1000) in {on_cpu:.1f} s CPU, "
          f"{per_on:.1f} gradients/iteration, min bulk-ESS {ess:.0f} "
          f"({ess / on_cpu:.0f} per CPU s), max |mean - certified| {worst:.1f} MCSE", flush=True)
    done, off_cpu, per_off, at_limit = _unreparametrised_chain()
    print(f"raw Longley, QR off: 1 chain, {done} of 2000 iterations in {off_cpu:.1f} s CPU, "
          f"{per_off:.1f} gradients/iteration, {at_limit:.0%} at the depth limit", flush=True)
    print(f"CPU per iteration, off / on: {(off_cpu / done) / (on_cpu / 8000):.0f}; "
          f"gradients per iteration, off / on: {per_off / per_on:.0f}", flush=True)
