"""Initialisation: box starts with retries, given points, a short optimisation, clear failure."""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import FiniteInBall, Gaussian, NowhereFinite
from worker.samplers import Chain, InitialisationError, SamplerSettings
from worker.samplers.initialisation import MAX_ATTEMPTS, initial_state


def test_random_start_retries_until_finite() -> None:
    """Finite only in [-0.5, 0.5]^2, a quarter... (1/4)^2 = 1/16 of the default box [-2, 2]^2."""
    target = FiniteInBall(2, 0.5)
    state = initial_state(target, "random", 2.0, np.random.default_rng(3), None, True)
    assert np.max(np.abs(state.position)) < 0.5
    assert target.evaluations > 1  # P(first try lands inside) = 1/16; with this seed it did not


def test_random_start_lies_in_the_box() -> None:
    target = Gaussian(np.zeros(50), np.eye(50))
    state = initial_state(target, "random", 0.7, np.random.default_rng(4), None, True)
    assert np.all(np.abs(state.position) <= 0.7)


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
def test_nothing_finite_fails_clearly(method: str) -> None:
    with pytest.raises(InitialisationError) as raised:
        Chain(NowhereFinite(3), SamplerSettings(method=method), np.random.SeedSequence(1))
    assert f"{MAX_ATTEMPTS} random points" in raised.value.reason
    assert "[-2, 2]" in raised.value.reason


def test_given_point_is_used_and_a_bad_one_is_refused() -> None:
    target = FiniteInBall(2, 1.0)
    given = np.array([0.25, -0.5])
    chain = Chain(target, SamplerSettings(initialisation="given"), np.random.SeedSequence(1), given)
    assert np.array_equal(chain.state.position, given)
    with pytest.raises(InitialisationError, match="given initial values"):
        Chain(target, SamplerSettings(), np.random.SeedSequence(1), np.array([3.0, 0.0]))
    with pytest.raises(InitialisationError, match="no initial values"):
        Chain(target, SamplerSettings(initialisation="given"), np.random.SeedSequence(1))
    with pytest.raises(InitialisationError, match="model has 2"):
        Chain(target, SamplerSettings(), np.random.SeedSequence(1), np.zeros(3))


def test_optimise_starts_at_the_mode() -> None:
    """The mode of N(m, S) is m (common practice); L-BFGS-B should land within 1e-4 of it."""
    mean = np.array([1.0, -2.0, 3.0, 0.5])
    covariance = np.diag([0.1, 1.0, 4.0, 9.0]) + 0.05
    target = Gaussian(mean, covariance)
    state = initial_state(target, "optimise", 2.0, np.random.default_rng(5), None, True)
    assert np.allclose(state.position, mean, atol=1e-4)
