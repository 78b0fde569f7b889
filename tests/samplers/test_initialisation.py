"""Initialisation: normal starts with narrowing retries, given points, a short optimisation, and a
clear failure."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from tests.samplers.targets import FiniteInBall, Gaussian, NowhereFinite
from worker.samplers import Chain, InitialisationError, SamplerSettings
from worker.samplers.initialisation import ATTEMPTS_PER_ROUND, ROUNDS, initial_state


class Recording:
    """Wraps a target and keeps every point it is asked about."""

    def __init__(self, target):
        self.target = target
        self.dimension = target.dimension
        self.points: list[np.ndarray] = []

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        self.points.append(np.array(u))
        return self.target.log_density_and_gradient(u)


def test_random_start_retries_until_finite() -> None:
    """Finite only where |u|_inf < 0.1 in 2-d: under N(0, 1) draws P(inside) = (2 Phi(0.1) - 1)^2
    = 0.0797^2 = 0.0064 (normal cdf, scipy.stats.norm), so the first round of 16 almost surely
    misses; at spread 1/8 in the fourth round P(inside) = (2 Phi(0.8) - 1)^2 = 0.58^2 = 0.33."""
    target = Recording(FiniteInBall(2, 0.1))
    state = initial_state(target, "random", 1.0, np.random.default_rng(3), None, True)
    assert np.max(np.abs(state.position)) < 0.1
    assert len(target.points) > ATTEMPTS_PER_ROUND  # found only after the spread narrowed


def test_random_starts_are_normal_with_the_spread_halving_each_round() -> None:
    """With nothing finite every attempt is drawn: each round's 16 x 50 coordinates are
    N(0, (spread / 2^round)^2). A Kolmogorov-Smirnov test against that normal (scipy.stats)
    keeps a p-value above 0.001 per round; the sample sd of 800 draws is within 10% of the
    round's spread (its relative sd is 1/sqrt(2 x 800) = 2.5%, so 10% is four sds)."""
    target = Recording(NowhereFinite(50))
    with pytest.raises(InitialisationError):
        initial_state(target, "random", 0.7, np.random.default_rng(4), None, True)
    points = np.array(target.points).reshape(ROUNDS, ATTEMPTS_PER_ROUND * 50)
    for k, values in enumerate(points):
        spread = 0.7 * 0.5**k
        assert scipy.stats.kstest(values, scipy.stats.norm(0, spread).cdf).pvalue > 1e-3
        assert abs(values.std() / spread - 1) < 0.1


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
def test_nothing_finite_fails_clearly(method: str) -> None:
    with pytest.raises(InitialisationError) as raised:
        Chain(NowhereFinite(3), SamplerSettings(method=method), np.random.SeedSequence(1))
    reason = raised.value.reason
    assert f"all {ROUNDS * ATTEMPTS_PER_ROUND} random points" in reason
    assert "spread 1 narrowing to 0.125" in reason
    assert ("or its gradient" in reason) == (method == "nuts")
    assert "initialisation 'given'" in reason and "start_spread" in reason


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
