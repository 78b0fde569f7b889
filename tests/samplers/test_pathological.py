"""Badly behaved targets end in reported divergences, never a crash, a hang or NaN draws."""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import FiniteOnlyAt, OverflowingGradient
from worker.samplers import Chain, SamplerSettings


@pytest.mark.parametrize("method", ["nuts", "hmc"])
def test_overflowing_gradient_gives_divergences(method: str) -> None:
    settings = SamplerSettings(method=method, warmup_iterations=300, draws=300)
    out = Chain(OverflowingGradient(), settings, np.random.SeedSequence(8)).run()
    assert out.completed
    assert np.all(np.isfinite(out.draws))
    assert out.warmup_stats["divergent"].sum() + out.stats["divergent"].sum() > 0


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_everywhere_divergent_target_finishes(method: str) -> None:
    """Every step leaves the support: all transitions diverge (or are rejected); it still ends."""
    point = np.array([0.3, -0.2])
    settings = SamplerSettings(method=method, warmup_iterations=100, draws=100)
    out = Chain(FiniteOnlyAt(point), settings, np.random.SeedSequence(9), point).run()
    assert out.completed
    assert np.all(out.draws == point)
    if method == "metropolis":
        assert np.all(out.stats["accept_probability"] == 0.0)
    else:
        assert np.all(out.stats["divergent"])
        assert np.all(np.isfinite(out.stats["step_size"])) and np.all(out.stats["step_size"] > 0)
