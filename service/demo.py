"""`make demo`: a local stack, one real job over HTTP, its summary and verdict, then stop.

The scenario is invented for the demo: weekly bread orders at six branches of a bakery, some weeks
with a promotion. Branch order rates are partially pooled (a hierarchical Poisson model), so a
branch with a short or noisy history borrows strength from the others. Sixteen weeks of counts
near a hundred inform each branch's rate well, so the branch levels are written directly (the
centred form); with only a few weeks per branch the non-centred form (level = mean + spread *
offset) would sample better. The data are simulated here from stated true values, which the
output shows beside the estimates.
"""

from __future__ import annotations

import argparse
import json
import sys
import textwrap
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import requests

from service.cli import loud
from service.local_stack import LocalStack, StartupError

BRANCHES = ("Harbour", "Old Town", "Station", "Market", "Riverside", "Hill")
WEEKS = 16
TRUE_TYPICAL_ORDERS = 120.0
TRUE_SPREAD = 0.30
TRUE_PROMOTION_EFFECT = 0.15
DATA_SEED = 20261201
JOB_SEED = 7
TERMINAL = {"succeeded", "failed", "cancelled", "timed_out"}
CAUTION = (
    "Caution: passing convergence checks does not prove the model right. They say the sampler "
    "explored the posterior of the model as written, not that the model fits the bakery."
)


def bakery_model() -> dict[str, Any]:
    """The model spec, in the spec language of DEVELOPERS.md."""
    return {
        "title": "weekly bread orders per bakery branch, partially pooled",
        "inputs": {
            "branches": {"type": "integer", "lower": 1},
            "weeks": {"type": "integer", "lower": 1},
            "branch": {"type": "integer", "shape": ["weeks"], "lower": 1, "upper": "branches"},
            "promotion": {"type": "real", "shape": ["weeks"], "lower": 0, "upper": 1},
            "orders": {"type": "integer", "shape": ["weeks"], "lower": 0},
        },
        "unknowns": {
            "mean_log_orders": {},
            "branch_spread": {"lower": 0},
            "branch_log_orders": {"shape": ["branches"]},
            "promotion_effect": {},
        },
        "priors": [
            {"on": "mean_log_orders", "distribution": "normal",
             "arguments": {"location": 4.5, "scale": 1}},
            {"on": "branch_spread", "distribution": "half_normal", "arguments": {"scale": 0.5}},
            {"on": "branch_log_orders", "distribution": "normal",
             "arguments": {"location": "mean_log_orders", "scale": "branch_spread"}},
            {"on": "promotion_effect", "distribution": "normal",
             "arguments": {"location": 0, "scale": 0.5}},
        ],
        "likelihood": [
            {"name": "weekly_orders", "observed": "orders", "distribution": "poisson",
             "arguments": {"log_rate": "branch_log_orders[branch] + promotion_effect * promotion"}},
        ],
        "per_draw": {
            "formulas": {
                "typical_weekly_orders": "exp(mean_log_orders)",
                "promotion_uplift": "exp(promotion_effect) - 1",
            },
        },
    }


def bakery_data(seed: int = DATA_SEED) -> tuple[dict[str, Any], dict[str, float]]:
    """Invented orders: WEEKS weeks at each branch; about one week in four has a promotion."""
    rng = np.random.default_rng(seed)
    offsets = rng.normal(size=len(BRANCHES))
    branch_log = np.log(TRUE_TYPICAL_ORDERS) + TRUE_SPREAD * offsets
    branch = np.repeat(np.arange(1, len(BRANCHES) + 1), WEEKS)
    promotion = (rng.uniform(size=branch.size) < 0.25).astype(float)
    orders = rng.poisson(np.exp(branch_log[branch - 1] + TRUE_PROMOTION_EFFECT * promotion))
    data = {
        "branches": len(BRANCHES),
        "weeks": int(branch.size),
        "branch": branch.tolist(),
        "promotion": promotion.tolist(),
        "orders": orders.tolist(),
    }
    truth = {
        "mean_log_orders": float(np.log(TRUE_TYPICAL_ORDERS)),
        "typical_weekly_orders": TRUE_TYPICAL_ORDERS,
        "branch_spread": TRUE_SPREAD,
        "promotion_effect": TRUE_PROMOTION_EFFECT,
        "promotion_uplift": float(np.exp(TRUE_PROMOTION_EFFECT) - 1),
    }
    for i, value in enumerate(branch_log, start=1):
        truth[f"branch_log_orders[{i}]"] = float(value)
    return data, truth


def demo_submission(chains: int = 4, warmup: int = 500, draws: int = 500) -> dict[str, Any]:
    data, _ = bakery_data()
    return {
        "model": bakery_model(),
        "data": data,
        "sampler": {"chains": chains, "seed": JOB_SEED, "warmup_iterations": warmup,
                    "draws": draws},
        "labels": {"scenario": "bakery-demo"},
    }


def progress_line(job: dict[str, Any]) -> str:
    parts = []
    for chain in job.get("chains", []):
        phase = chain.get("phase") or chain.get("state")
        parts.append(
            f"{chain['chain']}: {phase} {chain['iteration']}/{chain['iterations_total']}"
            + (f" ({chain['divergences']} div.)" if chain["divergences"] else "")
        )
    return f"{job['state']:9s} chains " + (", ".join(parts) if parts else "not yet created")


def format_number(value: Any, digits: int = 3) -> str:
    if value is None:
        return "-"
    if isinstance(value, str):
        return value
    return f"{value:.{digits}g}" if abs(value) < 1e4 else f"{value:.0f}"


def fixed(value: Any, decimals: int) -> str:
    return "-" if value is None or isinstance(value, str) else f"{value:.{decimals}f}"


def summary_table(quantities: list[dict[str, Any]], truth: dict[str, float]) -> str:
    level = quantities[0]["interval"]["level"] if quantities else 0.0
    header = ["quantity", "median", f"{100 * level:g}% from", "to", "mean", "R-hat", "bulk ESS",
              "tail ESS", "true"]
    rows = [header]
    for q in quantities:
        rows.append([
            q["name"], format_number(q.get("median")),
            format_number(q["interval"]["lower"]), format_number(q["interval"]["upper"]),
            format_number(q.get("mean")),
            fixed(q.get("rhat"), 3), fixed(q.get("bulk_ess"), 0), fixed(q.get("tail_ess"), 0),
            format_number(truth.get(q["name"])),
        ])
    widths = [max(len(row[i]) for row in rows) for i in range(len(header))]
    lines = ["  ".join(cell.rjust(w) if i else cell.ljust(w)
                       for i, (cell, w) in enumerate(zip(row, widths, strict=True)))
             for row in rows]
    lines.insert(1, "-" * len(lines[0]))
    return "\n".join(lines)


def verdict_text(verdict: dict[str, Any]) -> str:
    if verdict["passed"]:
        return "Verdict: PASSED - every convergence and sampler check is within its threshold."
    lines = ["Verdict: FAILED - these checks are outside their thresholds:"]
    for failed in verdict["failed_checks"]:
        lines.append(f"  - {failed['check']}: {failed['message']}")
    return "\n".join(lines)


def run_job(
    base_url: str,
    body: dict[str, Any],
    timeout: float,
    save_summary: Path | None = None,
    out: TextIO = sys.stdout,
) -> int:
    """Submit, follow progress, print the results. 0 when the job ran to completion."""
    response = requests.post(f"{base_url}/v1/jobs", json=body, timeout=30)
    if response.status_code != 202:
        print(f"the service refused the job ({response.status_code}):\n{response.text}", file=out)
        return 1
    job_url = requests.compat.urljoin(base_url, response.headers["Location"])
    print(f"submitted: {job_url}", file=out, flush=True)
    deadline = time.monotonic() + timeout
    shown, last_print = "", 0.0
    while True:
        job = requests.get(job_url, timeout=30).json()
        line = progress_line(job)
        now = time.monotonic()
        # One line per second at most, and only when something moved.
        if line != shown and (now - last_print >= 1.0 or job["state"] in TERMINAL):
            print(line, file=out, flush=True)
            shown, last_print = line, now
        if job["state"] in TERMINAL:
            break
        if now > deadline:
            print(f"the job did not finish within {timeout:.0f} s", file=out)
            return 1
        time.sleep(0.25)
    if job["state"] != "succeeded":
        print(f"the job ended {job['state']}: {job.get('error')}", file=out)
        return 1
    summary = requests.get(f"{job_url}/summary", timeout=30).json()
    if save_summary is not None:
        save_summary.write_text(json.dumps(summary, indent=1))
    _, truth = bakery_data()
    elapsed = job.get("elapsed_seconds")
    print(f"\nPosterior summary ({len(job['chains'])} chains"
          + (f", {elapsed:.1f} s" if elapsed is not None else "") + "):", file=out)
    print(summary_table(summary["quantities"], truth), file=out)
    print("\n" + verdict_text(summary["verdict"]), file=out)
    print(textwrap.fill(CAUTION, width=100), file=out, flush=True)
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m service.demo",
        description="Run the bakery demo job end to end on a local stack, then stop it.",
    )
    parser.add_argument("--var", type=Path, default=Path("var/demo"),
                        help="folder for the demo's store, broker files and logs")
    parser.add_argument("--broker", default="auto",
                        help="'auto' (redis-server if installed, else filesystem), 'redis', "
                             "'filesystem' or a broker URL")
    parser.add_argument("--processes", type=int, default=2,
                        help="pool processes of the one worker (chains run side by side)")
    parser.add_argument("--timeout", type=float, default=300.0,
                        help="seconds to wait for the job before giving up")
    parser.add_argument("--save-summary", type=Path, default=None,
                        help="also write the summary as read from the API to this JSON file")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    print(
        "drawyard demo: weekly bread orders at six bakery branches (invented data), a "
        "hierarchical Poisson model with partial pooling across branches.",
        flush=True,
    )
    stack = LocalStack(var_dir=args.var.resolve(), broker=args.broker, workers=1,
                       concurrency=args.processes)
    try:
        stack.start()
    except StartupError as error:
        print(f"could not start the local stack: {error}", file=sys.stderr)
        return 1
    try:
        if stack.broker_warning:
            print(loud([stack.broker_warning]), flush=True)
        print(f"API at {stack.base_url}, one worker, broker: {stack.broker_note}", flush=True)
        return run_job(stack.base_url, demo_submission(), args.timeout, args.save_summary)
    except requests.RequestException as error:
        print(f"lost contact with the service: {error}\n"
              f"logs are in {stack.var_dir / 'logs'}", file=sys.stderr)
        return 1
    finally:
        print("stopping the worker, the API and the broker ...", flush=True)
        stack.stop()


if __name__ == "__main__":
    sys.exit(main())
