"""Samplers: bulk-ESS per second and per gradient evaluation, minimum over quantities.

Every case runs here, one after another, on the same machine, so the figures (and the ratios
printed beside them) are comparable. Costs cover the whole chain, warm-up included: seconds of
wall time and calls of the log density and gradient (log density alone for random-walk
Metropolis). ESS is worker.diagnostics.bulk_ess over all chains of a case, minimum over the
unconstrained coordinates.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from worker.diagnostics import bulk_ess
from worker.samplers import Chain, SamplerSettings


class Counted:
    """Wraps a target and counts its evaluations."""

    def __init__(self, target):
        self.target = target
        self.dimension = target.dimension
        self.evaluations = 0

    def log_density(self, u: np.ndarray) -> float:
        self.evaluations += 1
        return self.target.log_density(u)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        self.evaluations += 1
        return self.target.log_density_and_gradient(u)


class Gaussian:
    """Zero-mean N(0, S) given S; gradient -S^-1 u."""

    def __init__(self, covariance: np.ndarray):
        self.precision = np.linalg.inv(covariance)
        self.dimension = covariance.shape[0]

    def log_density(self, u: np.ndarray) -> float:
        return float(-0.5 * u @ self.precision @ u)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        g = -(self.precision @ u)
        return float(0.5 * u @ g), g


class StandardNormal:
    def __init__(self, dimension: int):
        self.dimension = dimension

    def log_density(self, u: np.ndarray) -> float:
        return float(-0.5 * u @ u)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        return float(-0.5 * u @ u), -u


@dataclass
class Figures:
    label: str
    min_ess: float
    seconds: float
    evaluations: int

    @property
    def per_second(self) -> float:
        return self.min_ess / self.seconds

    @property
    def per_evaluation(self) -> float:
        return self.min_ess / self.evaluations


def measure(label: str, target, settings: SamplerSettings, chains: int, seed: int = 1) -> Figures:
    counted = Counted(target)
    started = time.perf_counter()
    children = np.random.SeedSequence(seed).spawn(chains)
    outputs = [Chain(counted, settings, child).run() for child in children]
    seconds = time.perf_counter() - started
    draws = np.stack([out.draws for out in outputs])
    min_ess = min(bulk_ess(draws[:, :, i]) for i in range(target.dimension))
    figures = Figures(label, min_ess, seconds, counted.evaluations)
    divergences = sum(int(out.stats.get("divergent", np.zeros(0)).sum()) for out in outputs)
    print(
        f"{label:58s} min bulk-ESS {min_ess:8.1f}  per s {figures.per_second:8.1f}  "
        f"per evaluation {figures.per_evaluation:.5f}  ({counted.evaluations} evaluations, "
        f"{seconds:.1f} s, {chains} chains, {divergences} divergences)",
        flush=True,
    )
    return figures


def ar_covariance(dimension: int, rho: float) -> np.ndarray:
    lags = np.abs(np.subtract.outer(np.arange(dimension), np.arange(dimension)))
    return rho**lags


def main() -> None:
    default = SamplerSettings()
    normal = measure("NUTS, 100-d standard normal, diagonal", StandardNormal(100), default, 2)
    correlated = Gaussian(ar_covariance(100, 0.9))
    diagonal = measure("NUTS, 100-d AR(0.9) Gaussian, diagonal metric", correlated, default, 2)
    dense = measure(
        "NUTS, 100-d AR(0.9) Gaussian, dense metric",
        correlated,
        SamplerSettings(preconditioning="full"),
        2,
    )
    hmc_normal = measure(
        "static HMC, 100-d standard normal, diagonal",
        StandardNormal(100),
        SamplerSettings(method="hmc"),
        2,
    )
    hmc_dense = measure(
        "static HMC, 100-d AR(0.9) Gaussian, dense metric",
        correlated,
        SamplerSettings(method="hmc", preconditioning="full"),
        2,
    )
    # Random-walk Metropolis needs O(d) iterations per effective draw (Roberts, Gelman & Gilks
    # 1997), so 100 dimensions would give a handful of effective draws; it runs at d = 10.
    metropolis = measure(
        "Metropolis, 10-d standard normal, diagonal",
        StandardNormal(10),
        SamplerSettings(method="metropolis", warmup_iterations=2000, draws=20000),
        2,
    )
    compiled = compiled_models()
    print(
        "ratios (per gradient evaluation): "
        f"dense/diagonal on AR(0.9) NUTS {dense.per_evaluation / diagonal.per_evaluation:.1f}; "
        f"NUTS/HMC on the standard normal {normal.per_evaluation / hmc_normal.per_evaluation:.2f}; "
        f"NUTS/HMC dense on AR(0.9) {dense.per_evaluation / hmc_dense.per_evaluation:.2f}; "
        f"NUTS standard normal / Metropolis 10-d "
        f"{normal.per_evaluation / metropolis.per_evaluation:.1f}" + compiled,
        flush=True,
    )


def compiled_models() -> str:
    """The logistic regression (50,000 x 20) and non-centred eight schools, compiled from specs."""
    try:
        from tests.bench.bench_modeling import eight_schools, logistic_regression
        from worker.modeling import compile_model
    except ImportError as error:
        print(f"compiled models skipped: {error}")
        return ""
    spec, data, _ = logistic_regression()
    logistic = measure(
        "NUTS, logistic regression 50000 x 20, compiled spec",
        compile_model(spec, data),
        # Shorter than the default: each gradient is a pass over 50,000 rows.
        SamplerSettings(warmup_iterations=200, draws=200),
        1,
    )
    spec, data, _ = eight_schools()
    schools = measure(
        "NUTS, eight schools non-centred, compiled spec",
        compile_model(spec, data),
        SamplerSettings(),
        4,
    )
    return (
        f"; logistic regression per s {logistic.per_second:.1f}, "
        f"eight schools per s {schools.per_second:.1f}"
    )


if __name__ == "__main__":
    main()
