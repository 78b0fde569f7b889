"""Samplers: bulk-ESS per second and per gradient evaluation, minimum over quantities.

Every case runs here, one after another, on the same machine, so the figures (and the ratios
printed beside them) are comparable. Costs cover the whole chain, warm-up included: seconds of
wall time and calls of the log density and gradient (log density alone for random-walk
Metropolis). ESS is worker.diagnostics.bulk_ess over all chains of a case, minimum over the
unconstrained coordinates.

`python tests/bench/bench_samplers.py --against OLD_TREE [case ...]` runs every case (or those
named) with the code of another checkout and with this one, alternately, and prints a table of
the two side by side (tests/bench/RESULTS.md, warm-up redesign).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

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


class ScaledNormal:
    """Independent N(0, scale_i^2) coordinates; gradient -u / scale^2."""

    def __init__(self, scales: np.ndarray):
        self.precision = 1.0 / np.asarray(scales, dtype=np.float64) ** 2
        self.dimension = len(self.precision)

    def log_density(self, u: np.ndarray) -> float:
        return float(-0.5 * (self.precision * u) @ u)

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        g = -(self.precision * u)
        return float(0.5 * u @ g), g


def cases() -> dict[str, tuple[str, object, SamplerSettings, int]]:
    """Every case by short name: (label, target, settings, chains)."""
    correlated = Gaussian(ar_covariance(100, 0.9))
    found = {
        "normal": ("NUTS, 100-d standard normal, diagonal", StandardNormal(100),
                   SamplerSettings(), 2),
        # Scales log-spaced over four decades: a per-coordinate metric makes it the standard
        # normal above, so its ESS per evaluation should come near that case's once warm-up
        # has found the scales (issue 12; the warm-up's cost is included).
        "anisotropic": ("NUTS, 100-d Gaussian, scales 0.01..100, diagonal",
                        ScaledNormal(np.logspace(-2, 2, 100)), SamplerSettings(), 2),
        "ar_diagonal": ("NUTS, 100-d AR(0.9) Gaussian, diagonal metric", correlated,
                        SamplerSettings(), 2),
        "ar_dense": ("NUTS, 100-d AR(0.9) Gaussian, dense metric", correlated,
                     SamplerSettings(preconditioning="full"), 2),
        "hmc_normal": ("static HMC, 100-d standard normal, diagonal", StandardNormal(100),
                       SamplerSettings(method="hmc"), 2),
        "hmc_dense": ("static HMC, 100-d AR(0.9) Gaussian, dense metric", correlated,
                      SamplerSettings(method="hmc", preconditioning="full"), 2),
        # Random-walk Metropolis needs O(d) iterations per effective draw (Roberts, Gelman &
        # Gilks 1997), so 100 dimensions would give a handful of effective draws; it runs at 10.
        "metropolis": ("Metropolis, 10-d standard normal, diagonal", StandardNormal(10),
                       SamplerSettings(method="metropolis", warmup_iterations=2000, draws=20000),
                       2),
    }  # fmt: skip
    try:
        from tests.bench.bench_modeling import eight_schools, logistic_regression
        from worker.modeling import compile_model
    except ImportError as error:
        print(f"compiled models skipped: {error}")
        return found
    spec, data, _ = logistic_regression()
    # Shorter than the default: each gradient is a pass over 50,000 rows.
    found["logistic"] = ("NUTS, logistic regression 50000 x 20, compiled spec",
                         compile_model(spec, data),
                         SamplerSettings(warmup_iterations=200, draws=200), 1)
    spec, data, _ = eight_schools()
    found["schools"] = ("NUTS, eight schools non-centred, compiled spec",
                        compile_model(spec, data), SamplerSettings(), 4)
    return found


def main(only: list[str] | None = None) -> None:
    """Every case (or those named in ``only``), then the ratios between them."""
    figures = {
        name: measure(label, target, settings, chains)
        for name, (label, target, settings, chains) in cases().items()
        if not only or name in only
    }
    ratios = {
        "dense/diagonal on AR(0.9) NUTS": ("ar_dense", "ar_diagonal"),
        "NUTS/HMC on the standard normal": ("normal", "hmc_normal"),
        "NUTS/HMC dense on AR(0.9)": ("ar_dense", "hmc_dense"),
        "NUTS standard normal / Metropolis 10-d": ("normal", "metropolis"),
        "NUTS standard normal / anisotropic (goal <= 2)": ("normal", "anisotropic"),
    }
    shown = [
        f"{text} {figures[a].per_evaluation / figures[b].per_evaluation:.2f}"
        for text, (a, b) in ratios.items()
        if a in figures and b in figures
    ]
    shown += [f"{figures[n].label} per s {figures[n].per_second:.1f}"
              for n in ("logistic", "schools") if n in figures]  # fmt: skip
    print("ratios (per gradient evaluation): " + "; ".join(shown), flush=True)


def compare(old_tree: str, only: list[str]) -> None:
    """Each case run by the code in ``old_tree`` (a checkout of an earlier commit) and by this
    one, alternately, in fresh processes: a markdown table of ESS per evaluation, new over old.

    The per-evaluation figures are deterministic for the fixed seeds, so only the per-second
    ones depend on the machine's load at the time.
    """
    import json
    import os
    import subprocess
    import sys

    here = Path(__file__).resolve()
    trees = {"old": str(Path(old_tree).resolve()), "new": str(here.parents[2])}
    names = [n for n in cases() if not only or n in only]
    print("| case | old per evaluation | new per evaluation | new / old | old per s | new per s |")
    print("|---|---|---|---|---|---|")
    for name in names:
        found = {}
        for which, tree in trees.items():
            environment = {**os.environ, "PYTHONPATH": tree, "OPENBLAS_NUM_THREADS": "1"}
            done = subprocess.run(
                [sys.executable, str(here), "--json", name],
                cwd=tree, env=environment, capture_output=True, text=True, check=True,
            )  # fmt: skip
            found[which] = json.loads(done.stdout.strip().splitlines()[-1])
        old, new = found["old"], found["new"]
        print(
            f"| {old['label']} | {old['per_evaluation']:.5f} | {new['per_evaluation']:.5f} | "
            f"{new['per_evaluation'] / old['per_evaluation']:.2f} | {old['per_second']:.1f} | "
            f"{new['per_second']:.1f} |",
            flush=True,
        )


def one_as_json(name: str) -> None:
    import json

    label, target, settings, chains = cases()[name]
    figures = measure(label, target, settings, chains)
    print(json.dumps({"label": label, "per_evaluation": figures.per_evaluation,
                      "per_second": figures.per_second}))  # fmt: skip


if __name__ == "__main__":
    import sys

    arguments = sys.argv[1:]
    if arguments[:1] == ["--json"]:
        one_as_json(arguments[1])
    elif arguments[:1] == ["--against"]:
        # This process only lists the cases; the children import the code of their own tree.
        sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
        compare(arguments[1], arguments[2:])
    else:
        main(arguments)
