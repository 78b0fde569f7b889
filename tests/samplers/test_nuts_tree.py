"""Structural facts of NUTS trajectories (Hoffman & Gelman 2014, sections 3.1 and 3.2)."""

from __future__ import annotations

import numpy as np

from tests.samplers.targets import Gaussian, IndependentGaussian
from worker.samplers import Chain, SamplerSettings


def test_tree_sizes_and_maximum_depth() -> None:
    """A trajectory after j doublings has at most 2^j - 1 new leapfrog steps, and j never exceeds
    the maximum tree depth; an ill-conditioned target with a unit metric hits the cap."""
    lags = np.abs(np.subtract.outer(np.arange(20), np.arange(20)))
    target = Gaussian(np.zeros(20), 0.95**lags)
    settings = SamplerSettings(
        preconditioning="none", maximum_tree_depth=3, warmup_iterations=200, draws=200
    )
    out = Chain(target, settings, np.random.SeedSequence(4)).run()
    depth, steps = out.stats["doublings"], out.stats["gradient_calls"]
    assert np.all((depth >= 1) & (depth <= 3))
    assert np.all(steps <= 2**depth - 1) and np.all(steps >= 2 ** (depth - 1))
    assert np.mean(depth == 3) > 0.5


def test_energy_is_the_hamiltonian_of_the_draw() -> None:
    """With a unit metric H = -log density + |p|^2 / 2, so energy >= -log density at the draw."""
    target = IndependentGaussian(np.zeros(4), np.ones(4))
    settings = SamplerSettings(preconditioning="none", warmup_iterations=100, draws=300)
    out = Chain(target, settings, np.random.SeedSequence(5)).run()
    assert np.all(out.stats["energy"] >= -out.stats["log_density"])
    expected = np.array([target.log_density(x) for x in out.draws])
    assert np.allclose(out.stats["log_density"], expected, rtol=0, atol=1e-12)
