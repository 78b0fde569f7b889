"""PSIS-LOO, bridge sampling and the Laplace approximation, each against the work it stands beside.

Scenario (invented data): a courier firm scores delivery attempts. Each attempt has 10 recorded
features (distance, time of day, parcel size, ...) and succeeds or not; the firm fits a logistic
regression with normal(0, 2.5) priors on the coefficients. Three figures, each a ratio measured
in this run (issue 17, "Performance"):

1. PSIS-LOO of 10,000 observations x 4,000 draws (4 chains of 1000), against one pass of
   log-mean-exp over the same array (the least any use of the pointwise values costs), with the
   peak memory beyond the stored arrays from tracemalloc, as a share of those arrays.
2. Bridge sampling of a finished 4 x 1000 job (500 attempts), against that job's own sampling.
3. A Laplace job against a default NUTS job on 5000 attempts x 10 features: wall-time ratio, and
   the largest difference in posterior means in NUTS posterior sds.
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np

from worker import runner
from worker.approximation.bridge import bridge_sampling
from worker.comparison.loo import psis_loo
from worker.modeling import compile_model

FEATURES = 10
CHAINS = 4
DRAWS = 1000

SPEC = {
    "title": "delivery attempt success",
    "inputs": {
        "rows": {"type": "integer", "lower": 1},
        "features": {"type": "integer", "lower": 1},
        "X": {"type": "real", "shape": ["rows", "features"]},
        "delivered": {"type": "integer", "shape": ["rows"], "lower": 0, "upper": 1},
    },
    "unknowns": {"intercept": {}, "coefficients": {"shape": ["features"]}},
    "priors": [
        {"on": "intercept", "distribution": "normal", "arguments": {"location": 0, "scale": 2.5}},
        {"on": "coefficients", "distribution": "normal",
         "arguments": {"location": 0, "scale": 2.5}},
    ],
    "likelihood": [
        {"name": "attempts", "observed": "delivered", "distribution": "bernoulli",
         "arguments": {"log_odds": "intercept + X @ coefficients"}},
    ],
}  # fmt: skip


def attempts(rows: int, seed: int) -> dict:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, FEATURES))
    truth = rng.normal(0.0, 0.5, size=FEATURES)
    delivered = rng.uniform(size=rows) < 1 / (1 + np.exp(-(0.8 + X @ truth)))
    return {"rows": rows, "features": FEATURES, "X": X.tolist(),
            "delivered": delivered.astype(int).tolist()}


def loo_row() -> None:
    rng = np.random.default_rng(17)
    n, sigma = 10_000, 1.0
    y = rng.normal(0.0, sigma, size=n)
    posterior_sd = sigma / np.sqrt(n)
    chains = []
    for _ in range(CHAINS):
        mu = rng.normal(y.mean(), posterior_sd, size=DRAWS)
        chains.append(-0.5 * ((y[None, :] - mu[:, None]) / sigma) ** 2
                      - np.log(sigma) - 0.5 * np.log(2 * np.pi))
    stored = sum(c.nbytes for c in chains)
    started = time.perf_counter()
    for c in chains:
        top = c.max(axis=0)
        np.log(np.mean(np.exp(c - top), axis=0))
    baseline = time.perf_counter() - started
    tracemalloc.start()
    started, cpu = time.perf_counter(), time.process_time()
    result = psis_loo(chains)
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"PSIS-LOO {n} observations x {CHAINS * DRAWS} draws: {seconds:.2f} s wall, "
          f"{cpu:.2f} s CPU; one log-mean-exp pass {baseline:.2f} s; ratio "
          f"{seconds / baseline:.1f}; peak memory {peak / 2 ** 20:.0f} MiB beyond the stored "
          f"{stored / 2 ** 20:.0f} MiB (ratio {peak / stored:.3f}); "
          f"max k-hat {np.max(result.k_hat):.2f}", flush=True)


def job(data: dict, seed: int, method: str = "nuts") -> tuple[dict, float, list]:
    """A job with default settings but the method, through the runner as a worker runs it
    (compilation, every task, then the finishing summary and verdict)."""
    sampler = {"seed": seed} if method == "nuts" else {"seed": seed, "method": method}
    body = {"model": SPEC, "data": data, "sampler": sampler}
    chains = runner.resolve_sampler(sampler)["chains"]
    started = time.perf_counter()
    results = [runner.start_chain(body, k).run() for k in range(chains)]
    outcome = runner.finish_job(body, results)
    seconds = time.perf_counter() - started
    return outcome, seconds, results


def bridge_row() -> None:
    data = attempts(500, 3)
    _, seconds, results = job(data, 5)
    model = compile_model(SPEC, data)
    dimension = model.dimension
    # The chains' values start with the constrained unknowns; these are all unbounded, so the
    # unconstrained draws are those columns.
    draws = np.stack([r.values[:, :dimension] for r in results])
    started = time.perf_counter()
    evidence = bridge_sampling(model, draws, np.random.default_rng(1))
    bridge_seconds = time.perf_counter() - started
    print(f"bridge sampling of a {CHAINS} x {DRAWS} job (500 rows): {bridge_seconds:.2f} s "
          f"against the job's sampling {seconds:.1f} s: ratio {bridge_seconds / seconds:.3f}; "
          f"log evidence {evidence.log_evidence:.2f} +- {evidence.relative_error:.3f}",
          flush=True)


def laplace_row() -> None:
    data = attempts(5000, 11)
    _, nuts_seconds, results = job(data, 7)
    dimension = compile_model(SPEC, data).dimension
    values = np.concatenate([r.values[:, :dimension] for r in results])
    outcome, laplace_seconds, approximation = job(data, 7, "laplace")
    gaussian = approximation[0].values[:, :dimension]
    adapted = approximation[0].adapted
    # The Gaussian's own mean is its mode (exactly, not a Monte Carlo estimate).
    error = np.abs(np.asarray(adapted["mode"]) - values.mean(axis=0))
    worst = float(np.max(error / values.std(axis=0)))
    print(f"Laplace job ({gaussian.shape[0]} draws) vs default NUTS job ({CHAINS} x {DRAWS}), "
          f"5000 x {FEATURES}: {laplace_seconds:.2f} s against {nuts_seconds:.1f} s: ratio "
          f"{laplace_seconds / nuts_seconds:.3f}; largest mean difference {worst:.3f} NUTS "
          f"posterior sd; k-hat {adapted['k_hat']:.2f} ({adapted['assessment']}); verdict "
          f"passed: {outcome['verdict']['passed']}", flush=True)


def main() -> None:
    loo_row()
    bridge_row()
    laplace_row()


if __name__ == "__main__":
    main()
