"""Progress is reported at a bounded rate; should_stop ends a run early and cleanly."""

from __future__ import annotations

import numpy as np

from tests.samplers.targets import IndependentGaussian
from worker.samplers import Chain, SamplerSettings

TARGET = IndependentGaussian(np.zeros(3), np.ones(3))


def test_progress_rate_is_bounded_and_phases_are_reported() -> None:
    calls: list[tuple[str, int, int]] = []
    settings = SamplerSettings(warmup_iterations=1234, draws=777)
    Chain(TARGET, settings, np.random.SeedSequence(1)).run(progress=lambda *a: calls.append(a))
    total = 1234 + 777
    assert len(calls) <= 101  # about every 1% of iterations, plus the last
    assert calls[-1][:2] == ("sampling", total)
    iterations = [c[1] for c in calls]
    assert iterations == sorted(iterations) and max(np.diff(iterations)) <= total // 100 + 1
    assert {c[0] for c in calls} == {"warmup", "sampling"}
    assert all(c[0] == "warmup" for c in calls if c[1] <= 1234)


def test_should_stop_ends_early_with_the_draws_so_far() -> None:
    settings = SamplerSettings(warmup_iterations=100, draws=100)
    chain = Chain(TARGET, settings, np.random.SeedSequence(2))
    polls = 0

    def stop() -> bool:
        nonlocal polls
        polls += 1
        return chain.iteration >= 130

    out = chain.run(should_stop=stop)
    assert not out.completed
    assert out.draws.shape == (30, 3)
    assert len(out.warmup_stats["accept_probability"]) == 100
    assert polls == 131  # polled before every iteration, including the one it refused
    assert chain.run().completed  # the same object can carry on


def test_stop_before_anything_runs() -> None:
    chain = Chain(TARGET, SamplerSettings(), np.random.SeedSequence(3))
    out = chain.run(should_stop=lambda: True)
    assert not out.completed and out.draws.shape == (0, 3) and chain.iteration == 0
