"""The NUTS and static HMC kernels make bitwise the same draws for a given seed as recorded.

The digests below were recorded from the kernels of main at commit 35a81e8 (before the NUTS loop
was reworked for speed, issue 18 item 4) with

    PYTHONPATH=$PWD python -m tests.samplers.test_pinned_draws

which prints them. A speed change to worker/samplers/nuts.py, hamiltonian.py or static_hmc.py must
leave them unchanged; a deliberate change of draws must say so and record new ones here.

The cases run the transitions themselves at a fixed step size and metric from a fixed start, so
they pin the kernels and not the warm-up (which may change on its own). Between them they cover
every metric kind, both tree directions, the maximum depth (a cap of 3, and the default 10 reached
in the centred funnel's neck), divergent subtrees (the funnel at a step size too large for its
neck, and a gradient that overflows) and static HMC with jittered, fixed and diverging steps.
Each digest hashes every position and every statistic of 150-300 transitions.

Bitwise equality holds for a given numpy build and CPU: a different BLAS can round the dense
metric's matrix-vector product differently. The check is against the recorded output of the
unchanged kernels, not against a copy of them.
"""

from __future__ import annotations

import hashlib

import numpy as np
import pytest

from tests.samplers.targets import CentredFunnel, Gaussian, IndependentGaussian, OverflowingGradient
from worker.samplers.hamiltonian import Metric, State
from worker.samplers.nuts import NutsTransition
from worker.samplers.static_hmc import StaticHmcTransition


def _ar(dimension: int, rho: float) -> np.ndarray:
    lags = np.abs(np.subtract.outer(np.arange(dimension), np.arange(dimension)))
    return rho**lags


def _cases() -> dict:
    """name -> (target, make transition from target, transitions, start)."""
    six = IndependentGaussian(np.linspace(-1.0, 2.0, 6), np.array([0.5, 1.0, 2.0, 3.0, 1.5, 0.7]))
    ar10 = Gaussian(np.zeros(10), _ar(10, 0.9))
    ar20 = Gaussian(np.zeros(20), _ar(20, 0.95))
    funnel = CentredFunnel()
    scales = np.array([0.5, 1.0, 2.0, 3.0, 1.5, 0.7]) ** 2
    return {
        "nuts_per_coordinate": (
            six, lambda t: NutsTransition(t, Metric("per_coordinate", scales), 0.6, 10, 1000.0),
            300, np.full(6, 0.3),
        ),
        "nuts_normal_100": (
            IndependentGaussian(np.zeros(100), np.ones(100)),
            lambda t: NutsTransition(t, Metric("per_coordinate", np.linspace(0.8, 1.2, 100)), 0.3,
                                     10, 1000.0),
            150, np.linspace(-2.0, 2.0, 100),
        ),
        "nuts_full": (
            ar10, lambda t: NutsTransition(t, Metric("full", _ar(10, 0.8)), 0.5, 10, 1000.0),
            200, np.linspace(-1.0, 1.0, 10),
        ),
        "nuts_none_depth_cap": (
            ar20, lambda t: NutsTransition(t, Metric.identity("none", 20), 0.08, 3, 1000.0),
            200, np.zeros(20) + 0.1,
        ),
        "nuts_funnel_divergent": (
            funnel, lambda t: NutsTransition(t, Metric.identity("per_coordinate", 10), 0.9, 10,
                                             1000.0),
            300, np.r_[1.0, np.full(9, 0.5)],
        ),
        "nuts_funnel_long": (
            funnel, lambda t: NutsTransition(t, Metric.identity("per_coordinate", 10), 0.35, 10,
                                             1000.0),
            300, np.r_[1.0, np.full(9, 0.5)],
        ),
        "nuts_overflowing_gradient": (
            OverflowingGradient(),
            lambda t: NutsTransition(t, Metric.identity("per_coordinate", 1), 0.9, 10, 1000.0),
            300, np.array([0.2]),
        ),
        "hmc_per_coordinate_jitter": (
            six, lambda t: StaticHmcTransition(t, Metric("per_coordinate", scales), 0.5, 2.0,
                                               True, 1024, 1000.0),
            200, np.full(6, 0.3),
        ),
        "hmc_funnel_divergent": (
            funnel, lambda t: StaticHmcTransition(t, Metric.identity("per_coordinate", 10), 0.9,
                                                  3.0, True, 1024, 1000.0),
            200, np.r_[1.0, np.full(9, 0.5)],
        ),
        "hmc_full_fixed": (
            ar10, lambda t: StaticHmcTransition(t, Metric("full", _ar(10, 0.8)), 0.4, 1.5, False,
                                                1024, 1000.0),
            150, np.linspace(-1.0, 1.0, 10),
        ),
    }


def digest(name: str) -> str:
    target, make, transitions, start = _cases()[name]
    transition = make(target)
    rng = np.random.default_rng(np.random.SeedSequence(20261203))
    hasher = hashlib.sha256()
    with np.errstate(all="ignore"):  # as the chain driver does: bad trajectories overflow
        state = State(start.copy(), *target.log_density_and_gradient(start.copy()))
        for _ in range(transitions):
            state, stats = transition(state, rng)
            hasher.update(np.ascontiguousarray(state.position, dtype=np.float64).tobytes())
            hasher.update(np.float64(state.log_density).tobytes())
            hasher.update(np.ascontiguousarray(state.gradient, dtype=np.float64).tobytes())
            for key in sorted(stats):
                hasher.update(key.encode())
                hasher.update(np.float64(stats[key]).tobytes())
    return hasher.hexdigest()


RECORDED = {
    "nuts_per_coordinate": "06b3bea79483150f55754f4e7ccc891d29802ca75ce4c4b1adfc1b449077cacc",
    "nuts_normal_100": "9b80b8c928a820fc1fdfe68a9ee5254ec9a921dfd345bbc0b371c0e5106823fa",
    "nuts_full": "94c0171de1a741e07a0fff9e0b26f0f540e5ed0c3c030410af33d96cf4bc198c",
    "nuts_none_depth_cap": "2ba469f0f1a984bd34bab4b1f234c9e7c037e45e9b7e28587c184eb3c7109313",
    "nuts_funnel_divergent": "f93af98ca28ceb4d2dac9f8bf5f693f286e605687d2b633b8e5547941814e930",
    "nuts_funnel_long": "ad433a76365a1d0d094299440afbb5bc11f4394ae61f4b628242a0e8ee1ae67d",
    "nuts_overflowing_gradient": "73137f4f201975203c7c4f15883e64f6784d9333d6abb1e50fd128af6ca972ec",
    "hmc_per_coordinate_jitter": "428ed04053c641640e53e5374463c9e221966bcc42b7a7ef38353186221697f0",
    "hmc_funnel_divergent": "a3d6b70a1427baeac3ae4042a8b663fda468d4846c51f94a1e76a37389f3cc93",
    "hmc_full_fixed": "3a70e5d67783274946a813cfd89cac5aca59bb9ea93612ff13b0f7debc23cdab",
}


@pytest.mark.parametrize("name", sorted(RECORDED))
def test_draws_match_the_recorded_kernel(name: str) -> None:
    assert digest(name) == RECORDED[name]


def test_every_case_is_recorded() -> None:
    assert set(RECORDED) == set(_cases())


if __name__ == "__main__":
    for case in _cases():
        print(f'    "{case}": "{digest(case)}",')
