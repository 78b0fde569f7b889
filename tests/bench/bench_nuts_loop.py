"""The NUTS loop: the sampler's own CPU time per leapfrog step, against the gradient's, in one run.

Issue 18 item 4. A chain on the compiled 100-d standard normal (default settings but 500 warm-up
iterations and 500 draws) is timed in CPU seconds (time.process_time, so time other processes hold
the cores is left out) and its gradient evaluations are counted; in the same rounds, interleaved
with the chains, the model's log density and gradient alone is timed on the points the chain
visited. Per leapfrog step:

    bookkeeping = chain CPU time / gradient evaluations - CPU time of one gradient evaluation

which is everything the sampler does around the model: the leapfrog arithmetic, tree building,
U-turn checks, progressive sampling, momentum draws and the chain's per-iteration records and
adaptation. Printed as microseconds, as a share of the chain's CPU time and as a ratio to the
gradient evaluation measured in the same run. Medians of ROUNDS rounds. Goal (issue 18):
bookkeeping <= 8 us per step and <= 25 % of the chain.

No timer runs inside the chain, so the timer's own cost is counted nowhere (a timer pair around
every evaluation costs about a microsecond and would be charged to one side or the other).
"""

from __future__ import annotations

import time

import numpy as np

from worker.modeling import compile_model
from worker.samplers import Chain, SamplerSettings

ROUNDS = 5
DIMENSION = 100


def standard_normal_model(dimension: int = DIMENSION):
    spec = {"inputs": {"d": {"type": "integer"}},
            "unknowns": {"x": {"shape": ["d"]}},
            "priors": [{"on": "x", "distribution": "normal",
                        "arguments": {"location": 0, "scale": 1}}]}
    return compile_model(spec, {"d": dimension})


def gradient_seconds(model, points: np.ndarray, calls: int) -> float:
    """CPU seconds per log density and gradient evaluation, cycling through ``points``."""
    evaluate = model.log_density_and_gradient
    rows = [np.ascontiguousarray(x) for x in points]
    start = time.process_time()
    for i in range(calls):
        evaluate(rows[i % len(rows)])
    return (time.process_time() - start) / calls


def measure(label: str, settings: SamplerSettings) -> tuple[float, float, float]:
    """(bookkeeping seconds per step, its share of the chain, its ratio to one gradient)."""
    model = standard_normal_model()
    per_step = np.empty(ROUNDS)
    gradient = np.empty(ROUNDS)
    with np.errstate(all="ignore"):
        for r in range(ROUNDS):
            chain = Chain(model, settings, np.random.SeedSequence(7))
            start = time.process_time()
            out = chain.run()
            seconds = time.process_time() - start
            evaluations = sum(out.evaluations.gradient.values())
            per_step[r] = seconds / evaluations
            gradient[r] = gradient_seconds(model, out.draws, evaluations)
    step, grad = float(np.median(per_step)), float(np.median(gradient))
    bookkeeping = step - grad
    print(f"{label}: {step * 1e6:.1f} us per leapfrog step, of which the gradient "
          f"{grad * 1e6:.1f} us and the sampler {bookkeeping * 1e6:.1f} us "
          f"({bookkeeping / step:.0%} of the chain; {bookkeeping / grad:.2f} x the gradient)",
          flush=True)
    return bookkeeping, bookkeeping / step, bookkeeping / grad


def main() -> None:
    short = {"warmup_iterations": 500, "draws": 500}
    bookkeeping, share, ratio = measure(
        "NUTS, compiled 100-d standard normal, diagonal metric", SamplerSettings(**short))
    measure("NUTS, compiled 100-d standard normal, dense metric",
            SamplerSettings(preconditioning="full", **short))
    print(f"\n{'figure':52s} {'value':>7s}    goal")
    print(f"{'sampler bookkeeping per leapfrog step (us)':52s} {bookkeeping * 1e6:7.1f}    <= 8")
    print(f"{'sampler bookkeeping share of the chain':52s} {share:7.0%}    <= 25 %")
    print(f"{'sampler bookkeeping / one gradient evaluation':52s} {ratio:7.2f}    <= 0.33 "
          "(the 25 % share)", flush=True)


if __name__ == "__main__":
    main()
