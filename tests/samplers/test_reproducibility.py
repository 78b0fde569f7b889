"""Same seed, settings and target: bitwise-identical draws; a different seed: different draws.

Per-chain seeds follow DEVELOPERS.md: SeedSequence(seed).spawn(chains), and a chain draws from
child 0 of its own sequence (child 1 is left for generated quantities).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import IndependentGaussian
from worker.samplers import Chain, SamplerSettings
from worker.samplers.chain import sampling_sequence

TARGET = IndependentGaussian(np.array([0.0, 1.0]), np.array([1.0, 3.0]))


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_same_seed_same_draws_different_seed_different_draws(method: str) -> None:
    settings = SamplerSettings(method=method, warmup_iterations=100, draws=100)
    a = Chain(TARGET, settings, np.random.SeedSequence(5)).run()
    b = Chain(TARGET, settings, np.random.SeedSequence(5)).run()
    c = Chain(TARGET, settings, np.random.SeedSequence(6)).run()
    assert np.array_equal(a.draws, b.draws)
    assert all(np.array_equal(a.stats[k], b.stats[k]) for k in a.stats)
    assert not np.array_equal(a.draws, c.draws)


def test_spawned_chains_differ_and_the_seed_is_not_consumed() -> None:
    settings = SamplerSettings(warmup_iterations=50, draws=50)
    children = np.random.SeedSequence(9).spawn(2)
    first = Chain(TARGET, settings, children[0]).run()
    second = Chain(TARGET, settings, children[1]).run()
    assert not np.array_equal(first.draws, second.draws)
    # Building a chain must not advance the caller's sequence (the runner spawns child 1 itself).
    assert children[0].n_children_spawned == 0
    again = Chain(TARGET, settings, children[0]).run()
    assert np.array_equal(first.draws, again.draws)


def test_sampling_stream_is_child_zero() -> None:
    seed = np.random.SeedSequence(12345)
    expected = np.random.SeedSequence(12345).spawn(2)[0]
    assert (
        sampling_sequence(seed, 0).generate_state(4).tolist() == expected.generate_state(4).tolist()
    )
