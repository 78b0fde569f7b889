"""Warm starts: a nightly refit started from last night's fit against the same refit started cold.

The scenario (invented data): a chain of 12 stores counts returned parcels per store per day.
Each night the team refits a partial-pooling Poisson model of the daily counts (a baseline rate,
a weekend effect, and per-store log rates pooled around the baseline through a spread; centred,
which suits stores with many days of data) with one more day
of observations for the same stores, so the parameter layout never changes. Night 1 is fitted
cold. Night 2 is fitted twice, side by side in this run: cold with the default 1000 warm-up
iterations, and warm from night 1's adapted records with 250. Both keep 1000 draws in 4 chains
and face the same default verdict.

Costs count the whole job through worker.runner (compilation, every chain, summary and verdict):
wall time, and gradient evaluations as every chain counted them (worker/samplers/target.py,
CountedTarget: initialisation, the warm-start checks, step-size searches, warm-up and sampling).
ESS is the minimum bulk-ESS over the summary's quantities.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from statistics import median

import numpy as np

from worker import runner

STORES = 12
HISTORY_DAYS = 28
CHAINS = 4
DRAWS = 1000
COLD_WARMUP = 1000
WARM_WARMUP = 250
SEED = 2026
REPEATS = 3

SPEC = {
    "title": "returned parcels per store per day",
    "inputs": {
        "stores": {"type": "integer", "lower": 1},
        "rows": {"type": "integer", "lower": 1},
        "store": {"type": "integer", "shape": ["rows"], "lower": 1, "upper": "stores"},
        "weekend": {"type": "real", "shape": ["rows"]},
        "returns": {"type": "integer", "shape": ["rows"], "lower": 0},
    },
    "unknowns": {
        "baseline": {},
        "weekend_effect": {},
        "spread": {"lower": 0},
        "store_level": {"shape": ["stores"]},
    },
    "derived": {
        "log_rate": "store_level[store] + weekend_effect * weekend",
    },
    "priors": [
        {"on": "baseline", "distribution": "normal", "arguments": {"location": 2, "scale": 2}},
        {"on": "weekend_effect", "distribution": "normal",
         "arguments": {"location": 0, "scale": 1}},
        {"on": "spread", "distribution": "half_normal", "arguments": {"scale": 1}},
        {"on": "store_level", "distribution": "normal",
         "arguments": {"location": "baseline", "scale": "spread"}},
    ],
    "likelihood": [
        {"name": "daily_returns", "observed": "returns", "distribution": "poisson",
         "arguments": {"log_rate": "log_rate"}},
    ],
}  # fmt: skip


def data_through(days: int) -> dict:
    """The first ``days`` days of the invented history (fixed seed: night 2 extends night 1)."""
    rng = np.random.default_rng(606)
    effects = rng.normal(0.0, 0.5, size=STORES)
    day = np.repeat(np.arange(days + 1), STORES)
    store = np.tile(np.arange(STORES), days + 1)
    weekend = (day % 7 >= 5).astype(float)
    rate = np.exp(2.3 + 0.4 * weekend + effects[store])
    returns = rng.poisson(rate)
    keep = day < days
    return {
        "stores": STORES,
        "rows": int(keep.sum()),
        "store": (store[keep] + 1).tolist(),
        "weekend": weekend[keep].tolist(),
        "returns": returns[keep].tolist(),
    }


@dataclass
class Fit:
    seconds: float
    cpu_seconds: float
    gradients: int
    min_ess: float
    passed: bool
    failed: str
    adapted: list[dict]

    @property
    def ess_per_second(self) -> float:
        return self.min_ess / self.seconds

    @property
    def ess_per_gradient(self) -> float:
        return self.min_ess / self.gradients


def fit(days: int, warmup: int, seed: int, warm_start: dict | None = None) -> Fit:
    """One job through the runner, as a worker would run it (chains one after another)."""
    body = {
        "model": SPEC,
        "data": data_through(days),
        "sampler": {"chains": CHAINS, "warmup_iterations": warmup, "draws": DRAWS, "seed": seed},
    }
    if warm_start is not None:
        body["warm_start"] = warm_start
    started, cpu_started = time.perf_counter(), time.process_time()
    problems = runner.check_submission(body)
    if problems:
        raise ValueError(problems)
    results = [runner.start_chain(body, k).run() for k in range(CHAINS)]
    outcome = runner.finish_job(body, results)
    seconds, cpu_seconds = time.perf_counter() - started, time.process_time() - cpu_started
    # every chain here was started, not resumed, so each has its counts
    gradients = sum(sum(r.evaluations.gradient.values()) for r in results)
    essays = [r["bulk_ess"] for r in outcome["summary"] if r["bulk_ess"] is not None]
    failed = ", ".join(
        sorted({f"{c['check']} ({c['quantity']})" for c in outcome["verdict"]["failed_checks"]})
    )
    return Fit(
        seconds, cpu_seconds, gradients, min(essays), outcome["verdict"]["passed"], failed,
        [r.adapted for r in results],
    )  # fmt: skip


def show(label: str, fits: list[Fit]) -> dict[str, float]:
    """Print one row of medians over the repetitions; return them for the ratios."""
    row = {
        "seconds": median([f.seconds for f in fits]),
        "cpu": median([f.cpu_seconds for f in fits]),
        "gradients": median([f.gradients for f in fits]),
        "ess": median([f.min_ess for f in fits]),
        "per_second": median([f.ess_per_second for f in fits]),
        "per_gradient": median([f.ess_per_gradient for f in fits]),
    }
    verdicts = " ".join("passed" if f.passed else f"FAILED ({f.failed})" for f in fits)
    print(
        f"{label:30s} {row['seconds']:6.1f} s {row['cpu']:6.1f} s {row['gradients']:9.0f} "
        f"{row['ess']:8.0f} {row['per_second']:8.1f} {row['per_gradient']:8.4f}  {verdicts}",
        flush=True,
    )
    return row


def main() -> None:
    print(
        f"{STORES} stores, {HISTORY_DAYS} days on night 1; {CHAINS} chains of {DRAWS} draws; "
        f"medians over {REPEATS} seeds on night 2"
    )
    print(
        f"{'fit':30s} {'wall':>8s} {'CPU':>8s} {'gradients':>9s} {'min ESS':>8s} "
        f"{'ESS/s':>8s} {'ESS/grad':>8s}  verdicts"
    )
    night_1 = fit(HISTORY_DAYS, COLD_WARMUP, SEED)
    show(f"night 1, cold ({COLD_WARMUP} warm-up)", [night_1])
    member = runner.warm_start_from({"adapted": night_1.adapted}, job="night-1")
    colds: list[Fit] = []
    warms: list[Fit] = []
    for r in range(REPEATS):
        # alternate, so that load from other processes falls on both alike
        colds.append(fit(HISTORY_DAYS + 1, COLD_WARMUP, SEED + 1 + r))
        warms.append(fit(HISTORY_DAYS + 1, WARM_WARMUP, SEED + 1 + r, member))
    cold = show(f"night 2, cold ({COLD_WARMUP} warm-up)", colds)
    warm = show(f"night 2, warm ({WARM_WARMUP} warm-up)", warms)
    same = all(f.passed for f in colds + warms)
    print(
        "ratios warm/cold on night 2 (medians): "
        f"wall time {warm['seconds'] / cold['seconds']:.2f}; "
        f"CPU time {warm['cpu'] / cold['cpu']:.2f}; "
        f"gradient evaluations {warm['gradients'] / cold['gradients']:.2f}; "
        f"bulk-ESS per second {warm['per_second'] / cold['per_second']:.2f}; "
        f"per gradient {warm['per_gradient'] / cold['per_gradient']:.2f}; "
        f"every verdict passed: {'yes' if same else 'NO'}",
        flush=True,
    )


if __name__ == "__main__":
    main()
