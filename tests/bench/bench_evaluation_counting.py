"""The cost of counting evaluations: NUTS chains with the counting wrapper against a pass-through.

Every chain wraps its target in worker.samplers.target.CountedTarget, one integer increment and
one extra call per evaluation. The baseline here is a target the chain takes as already counted
(so it adds no wrapper) whose counters never move. Both run side by side, alternating, on two
targets: a 10-dimensional independent Gaussian written in numpy (about the cheapest evaluation
there is, so the worst case for the overhead) and the compiled 15-parameter Poisson model of
bench_warm_start. Figures are medians of CPU time over the repetitions.
"""

from __future__ import annotations

import time
from statistics import median
from typing import Any

import numpy as np

from tests.bench.bench_warm_start import SPEC, data_through
from tests.samplers.targets import IndependentGaussian
from worker.modeling import compile_model
from worker.samplers import Chain, SamplerSettings
from worker.samplers import chain as chain_module

REPEATS = 5
SETTINGS = SamplerSettings(warmup_iterations=500, draws=500)


class Uncounted:
    """Looks counted to the chain (no wrapper is added) but calls the model directly."""

    def __init__(self, inner: Any):
        self.dimension = inner.dimension
        self.gradient_evaluations = 0
        self.log_density_evaluations = 0
        self.log_density = inner.log_density
        self.log_density_and_gradient = inner.log_density_and_gradient


def cpu_seconds(target: Any, seed: int) -> float:
    started = time.process_time()
    Chain(target, SETTINGS, np.random.SeedSequence(seed)).run()
    return time.process_time() - started


def compare(label: str, model: Any) -> None:
    counted, baseline = [], []
    counting = chain_module.CountedTarget
    for r in range(REPEATS):
        counted.append(cpu_seconds(model, r))
        # the chain's check "already counted?" then accepts the pass-through as is
        chain_module.CountedTarget = Uncounted  # type: ignore[misc]
        try:
            baseline.append(cpu_seconds(Uncounted(model), r))
        finally:
            chain_module.CountedTarget = counting  # type: ignore[misc]
    c, b = median(counted), median(baseline)
    print(f"{label:45s} counted {c:6.3f} s  pass-through {b:6.3f} s  ratio {c / b:.3f}", flush=True)


def main() -> None:
    print(f"NUTS, {SETTINGS.warmup_iterations} warm-up + {SETTINGS.draws} draws, "
          f"median CPU time per chain over {REPEATS} seeds")  # fmt: skip
    compare("independent Gaussian, d = 10 (numpy)", IndependentGaussian(
        np.zeros(10), np.linspace(0.5, 2.0, 10)))  # fmt: skip
    compare("Poisson partial pooling, d = 15 (compiled)", compile_model(SPEC, data_through(28)))


if __name__ == "__main__":
    main()
