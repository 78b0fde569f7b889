"""A chain started from an earlier chain's adapted state (worker/samplers/warm_schedule.py).

What is checked: the warm schedule's single refresh window; the earlier metric and step size are
used from iteration 0 and the earlier position is the first state unless a point is given; the
metric at the window's end is the window covariance shrunk toward the earlier metric with the
documented weight; earlier metrics of another kind are converted as documented; the earlier state
is a start, not a fixed setting (a step size 100 times too large is adapted away).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import Gaussian
from worker.samplers import Chain, SamplerSettings
from worker.samplers.metric_adaptation import RunningCovariance
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


def test_the_warm_schedule_has_one_refresh_window() -> None:
    assert warm_schedule(200).windows == ((50, 160),)
    assert warm_schedule(250).windows == ((62, 200),)
    assert warm_schedule(19).windows == ()
    assert warm_schedule(0).windows == ()


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_a_warm_chain_uses_the_warm_schedule(method: str) -> None:
    settings = SamplerSettings(method=method, warmup_iterations=200, draws=10)
    chain = Chain(target(), settings, np.random.SeedSequence(3), warm_start=warm(method=method))
    assert chain.schedule.windows == ((50, 160),)
    cold = Chain(target(), settings, np.random.SeedSequence(3))
    assert cold.schedule.windows != chain.schedule.windows


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


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
@pytest.mark.parametrize("metric", ["per_coordinate", "full"])
def test_the_refresh_shrinks_the_window_covariance_toward_the_earlier_metric(
    metric, method
) -> None:
    settings = SamplerSettings(
        method=method, preconditioning=metric, warmup_iterations=200, draws=10
    )
    start = warm(metric, method=method)
    chain = Chain(target(), settings, np.random.SeedSequence(6), warm_start=start)
    window = RunningCovariance(3, metric == "full")
    chain.run(should_stop=lambda: chain.iteration >= 50)
    while chain.iteration < 160:
        chain.step()
        window.add(chain.state.position)
        if chain.iteration < 160:
            current = chain.proposal.covariance if method == "metropolis" else chain.metric.inverse
            assert current.tolist() == start.covariance.tolist()
    assert window.count == 110
    weight = 110 / (110 + EARLIER_COUNT)
    expected = weight * window.covariance() + (1 - weight) * start.covariance
    refreshed = chain.proposal.covariance if method == "metropolis" else chain.metric.inverse
    np.testing.assert_allclose(refreshed, expected, rtol=1e-12)


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
