"""A chain started from an earlier chain's adapted state (worker/samplers/warm_schedule.py).

What is checked: the warm schedule's stages (approach to 25%, refits at 50% and 80%); the earlier
metric and step size are used from iteration 0 and the earlier position is the first state unless a
point is given; the metric after each refit is the blocks' weighted covariance (numpy.cov with
aweights) shrunk toward the earlier metric with the documented weights; earlier metrics of another
kind are converted as documented; the earlier state is a start, not a fixed setting (a step size
100 times too large is adapted away).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import Gaussian
from worker.samplers import Chain, SamplerSettings
from worker.samplers.metric_adaptation import OLDER_WEIGHT
from worker.samplers.warm_schedule import EARLIER_COUNT, WarmStart, warm_schedule

COVARIANCE = np.array([[1.0, 0.6, 0.0], [0.6, 2.0, -0.3], [0.0, -0.3, 0.5]])


def target() -> Gaussian:
    return Gaussian(np.array([0.5, -1.0, 2.0]), COVARIANCE)


def warm(metric: str = "per_coordinate", step_size: float = 0.7, method: str = "nuts") -> WarmStart:
    covariance = COVARIANCE if metric == "full" else np.diag(COVARIANCE).copy()
    metropolis = method == "metropolis"
    return WarmStart(
        metric=metric,
        covariance=covariance * 1.1,  # a little off, as an earlier day's fit would be
        step_size=None if metropolis else step_size,
        proposal_scale=1.3 if metropolis else None,
        position=np.array([0.4, -0.8, 2.1]),
    )


def stages(schedule) -> tuple[int, tuple[int, ...]]:
    return schedule.approach_end, schedule.refits


def test_the_warm_schedule_has_an_approach_two_refits_and_polish() -> None:
    assert stages(warm_schedule(200)) == (50, (100, 160))
    assert stages(warm_schedule(250)) == (62, (125, 200))
    assert stages(warm_schedule(38)) == (9, (19, 30))  # the shortest with a 10-draw first block
    assert warm_schedule(37).refits == ()
    assert warm_schedule(0).refits == ()


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_a_warm_chain_uses_the_warm_schedule(method: str) -> None:
    settings = SamplerSettings(method=method, warmup_iterations=200, draws=10)
    chain = Chain(target(), settings, np.random.SeedSequence(3), warm_start=warm(method=method))
    assert stages(chain.schedule) == (50, (100, 160))
    cold = Chain(target(), settings, np.random.SeedSequence(3))
    assert stages(cold.schedule) != stages(chain.schedule)


@pytest.mark.parametrize("method", ["nuts", "hmc"])
def test_the_earlier_metric_and_step_size_are_used_from_iteration_zero(method: str) -> None:
    settings = SamplerSettings(method=method, warmup_iterations=200, draws=10)
    start = warm()
    chain = Chain(target(), settings, np.random.SeedSequence(4), warm_start=start)
    assert chain.metric.inverse.tolist() == start.covariance.tolist()
    assert chain.step_size == start.step_size
    chain.run(should_stop=lambda: chain.iteration >= 49)
    assert chain.metric.inverse.tolist() == start.covariance.tolist()
    # the warm-up statistics record the earlier step size at iteration 0 (static HMC within its
    # +-10% jitter)
    assert chain.warmup_stats["step_size"][0] == pytest.approx(start.step_size, rel=0.1)
    if method == "nuts":
        assert chain.warmup_stats["step_size"][0] == start.step_size


def test_metropolis_starts_from_the_earlier_proposal() -> None:
    settings = SamplerSettings(method="metropolis", warmup_iterations=200, draws=10)
    start = warm(method="metropolis")
    chain = Chain(target(), settings, np.random.SeedSequence(4), warm_start=start)
    assert chain.proposal.covariance.tolist() == start.covariance.tolist()
    assert np.exp(chain.proposal.log_scale) == pytest.approx(1.3, rel=1e-14)


@pytest.mark.parametrize("initialisation", ["random", "optimise"])
def test_the_earlier_position_is_the_first_state(initialisation: str) -> None:
    settings = SamplerSettings(initialisation=initialisation, warmup_iterations=50, draws=10)
    chain = Chain(target(), settings, np.random.SeedSequence(5), warm_start=warm())
    assert chain.state.position.tolist() == [0.4, -0.8, 2.1]
    given = np.array([1.0, 1.0, 1.0])
    chain = Chain(target(), settings, np.random.SeedSequence(5), given, warm_start=warm())
    assert chain.state.position.tolist() == given.tolist()


def expected_refresh(earlier: np.ndarray, draws: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The documented refresh, written out independently of worker/samplers: numpy.cov with
    ``aweights`` for the estimate, Kish's effective count n = (sum w)^2 / sum w^2, then each
    variance log-linearly and each correlation linearly toward the earlier metric's, with weight
    n / (n + EARLIER_COUNT)."""
    covariance = np.atleast_2d(np.cov(draws.T, aweights=weights))
    n = weights.sum() ** 2 / (weights**2).sum()
    w = n / (n + EARLIER_COUNT)
    earlier_matrix = earlier if earlier.ndim == 2 else np.diag(earlier)
    variances = np.exp(
        w * np.log(np.diag(covariance)) + (1 - w) * np.log(np.diag(earlier_matrix))
    )
    if earlier.ndim == 1:
        return variances
    sd, earlier_sd = np.sqrt(np.diag(covariance)), np.sqrt(np.diag(earlier_matrix))
    correlation = w * covariance / np.outer(sd, sd) + (1 - w) * earlier_matrix / np.outer(
        earlier_sd, earlier_sd
    )
    return correlation * np.outer(np.sqrt(variances), np.sqrt(variances))


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
@pytest.mark.parametrize("metric", ["per_coordinate", "full"])
def test_each_refit_shrinks_the_blocks_covariance_toward_the_earlier_metric(
    metric, method
) -> None:
    settings = SamplerSettings(
        method=method, preconditioning=metric, warmup_iterations=200, draws=10
    )
    start = warm(metric, method=method)
    chain = Chain(target(), settings, np.random.SeedSequence(6), warm_start=start)

    def current() -> np.ndarray:
        return chain.proposal.covariance if method == "metropolis" else chain.metric.inverse

    chain.run(should_stop=lambda: chain.iteration >= 50)
    positions = []
    while chain.iteration < 160:
        chain.step()
        positions.append(chain.state.position.copy())
        if chain.iteration < 100:
            assert current().tolist() == start.covariance.tolist()
        if chain.iteration == 100:
            first = np.array(positions)
            np.testing.assert_allclose(
                current(), expected_refresh(start.covariance, first, np.ones(50)), rtol=1e-10
            )
    # The final refit: the block [100, 160) at weight 1 and the block [50, 100) at OLDER_WEIGHT.
    weights = np.r_[np.full(50, OLDER_WEIGHT), np.ones(60)]
    expected = expected_refresh(start.covariance, np.array(positions), weights)
    np.testing.assert_allclose(current(), expected, rtol=1e-10)


@pytest.mark.parametrize(
    ("earlier", "now", "expected"),
    [
        ("full", "per_coordinate", np.diag(COVARIANCE) * 1.1),
        ("per_coordinate", "full", np.diag(np.diag(COVARIANCE)) * 1.1),
        ("per_coordinate", "none", np.ones(3)),
        ("full", "none", np.ones(3)),
    ],
)
def test_an_earlier_metric_of_another_kind_is_converted(earlier, now, expected) -> None:
    settings = SamplerSettings(preconditioning=now, warmup_iterations=100, draws=10)
    chain = Chain(target(), settings, np.random.SeedSequence(7), warm_start=warm(earlier))
    np.testing.assert_allclose(chain.metric.inverse, expected, rtol=1e-15)
    # the step size is searched again, from the earlier one, since its units changed
    same = SamplerSettings(preconditioning=earlier, warmup_iterations=100, draws=10)
    unchanged = Chain(target(), same, np.random.SeedSequence(7), warm_start=warm(earlier))
    assert unchanged.step_size == 0.7
    assert chain.step_size != 0.7


@pytest.mark.parametrize("step_size", [70.0, 0.007])
def test_a_step_size_far_off_is_adapted_away(step_size: float) -> None:
    """A record 100 times too large or too small: the adapted step size ends within a factor 1.5
    of the one a good record (0.7) leads to, and sampling has no divergences."""
    settings = SamplerSettings(warmup_iterations=200, draws=200)
    good = Chain(target(), settings, np.random.SeedSequence(8), warm_start=warm()).run()
    bad = Chain(
        target(), settings, np.random.SeedSequence(8), warm_start=warm(step_size=step_size)
    ).run()
    ratio = bad.adapted["step_size"] / good.adapted["step_size"]
    assert 1 / 1.5 < ratio < 1.5, ratio
    assert not bad.stats["divergent"].any()
    # the record was bad: the first trajectory diverged (too large) or took hundreds of steps
    first = {k: v[0] for k, v in bad.warmup_stats.items()}
    assert first["step_size"] == step_size
    assert first["divergent"] if step_size > 1 else first["gradient_calls"] >= 255


def test_mismatched_warm_starts_are_refused() -> None:
    settings = SamplerSettings(warmup_iterations=20, draws=10)
    with pytest.raises(ValueError, match="step_size"):
        Chain(target(), settings, np.random.SeedSequence(9), warm_start=warm(method="metropolis"))
    short = WarmStart("per_coordinate", np.ones(2), step_size=0.5)
    with pytest.raises(ValueError, match="shape"):
        Chain(target(), settings, np.random.SeedSequence(9), warm_start=short)
