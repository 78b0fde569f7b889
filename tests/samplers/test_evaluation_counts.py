"""Every evaluation of the model a chain makes is counted, by phase, and survives a resume.

The reference each time is outside the sampler's own bookkeeping: a target that counts the calls
made into it. For sampling, the counts are also tied to the stored statistics: static HMC without
jitter takes ceil(integration time / step size) leapfrog steps per iteration (Neal 2011, section
5.3.2), NUTS as many as its ``leapfrog_steps`` statistic says; each step evaluates the log density
and its gradient once, and an iteration starts from the gradient its state carries, so there is no
further evaluation per iteration (constant 0).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tests.samplers.targets import Gaussian
from worker.samplers import Chain, SamplerSettings
from worker.samplers.chain import EvaluationCounts
from worker.samplers.snapshot import decode, encode


class CallCounting(Gaussian):
    """A Gaussian that counts both kinds of call made into it, independently of the chain."""

    def __init__(self) -> None:
        super().__init__(np.array([0.5, -1.0]), np.array([[1.0, 0.3], [0.3, 0.5]]))
        self.density_calls = 0

    def log_density(self, u: np.ndarray) -> float:
        self.density_calls += 1
        return super().log_density(u)


def totals(counts: EvaluationCounts) -> tuple[int, int]:
    return sum(counts.gradient.values()), sum(counts.log_density.values())


def test_static_hmc_without_jitter_samples_with_draws_times_steps_gradients() -> None:
    settings = SamplerSettings(
        method="hmc", warmup_iterations=150, draws=200, jitter=False, integration_time=1.3
    )
    model = CallCounting()
    output = Chain(model, settings, np.random.SeedSequence(11)).run()
    assert not output.stats["divergent"].any()  # a divergence ends a trajectory early
    step = float(output.adapted["step_size"])
    steps = min(2**settings.maximum_tree_depth, math.ceil(settings.integration_time / step))
    assert set(output.stats["gradient_calls"]) == {steps}
    counts = output.evaluations
    assert counts is not None
    assert counts.gradient["sampling"] == settings.draws * steps
    assert totals(counts) == (model.gradient_calls, model.density_calls)
    assert counts.log_density == {"warmup": 0, "sampling": 0}


@pytest.mark.parametrize("initialisation", ["random", "optimise"])
def test_nuts_samples_with_as_many_gradients_as_leapfrog_steps(initialisation: str) -> None:
    settings = SamplerSettings(warmup_iterations=100, draws=150, initialisation=initialisation)
    model = CallCounting()
    output = Chain(model, settings, np.random.SeedSequence(12)).run()
    counts = output.evaluations
    assert counts is not None
    assert counts.gradient["sampling"] == int(output.stats["gradient_calls"].sum())
    assert totals(counts) == (model.gradient_calls, model.density_calls)
    # Warm-up holds its own leapfrog steps plus initialisation and the step-size searches (at
    # least one evaluation for the start and two trial steps for the first search).
    warmup_steps = int(output.warmup_stats["gradient_calls"].sum())
    assert counts.gradient["warmup"] >= warmup_steps + 3


def test_initialisation_and_the_first_step_size_search_count_as_warmup() -> None:
    settings = SamplerSettings(warmup_iterations=0, draws=20, initialisation="optimise")
    model = CallCounting()
    chain = Chain(model, settings, np.random.SeedSequence(13))
    before_any_iteration = chain.evaluation_counts()
    assert before_any_iteration is not None
    assert before_any_iteration.gradient["warmup"] == model.gradient_calls >= 3
    assert before_any_iteration.gradient["sampling"] == 0
    output = chain.run()
    assert output.evaluations.gradient["warmup"] == before_any_iteration.gradient["warmup"]
    assert output.evaluations.gradient["sampling"] == int(output.stats["gradient_calls"].sum())


def test_metropolis_counts_log_density_evaluations_and_no_gradients() -> None:
    settings = SamplerSettings(method="metropolis", warmup_iterations=120, draws=80)
    model = CallCounting()
    output = Chain(model, settings, np.random.SeedSequence(14)).run()
    counts = output.evaluations
    assert counts is not None
    assert counts.gradient == {"warmup": 0, "sampling": 0} and model.gradient_calls == 0
    # one proposal per iteration; the starting point is evaluated at least once more
    assert counts.log_density["sampling"] == settings.draws
    assert counts.log_density["warmup"] >= settings.warmup_iterations + 1
    assert counts.log_density["warmup"] + counts.log_density["sampling"] == model.density_calls


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_a_resumed_chain_reports_the_uninterrupted_counts(method: str) -> None:
    settings = SamplerSettings(method=method, warmup_iterations=100, draws=60)
    seed = np.random.SeedSequence(15)
    reference = Chain(CallCounting(), settings, seed).run().evaluations
    for stop in (0, 1, 50, 99, 100, 101, 159):
        first = Chain(CallCounting(), settings, seed)
        first.run(should_stop=lambda c=first, s=stop: c.iteration >= s)
        resumed_model = CallCounting()
        resumed = Chain.restore(resumed_model, first.snapshot()).run()
        assert resumed.evaluations == reference, f"{method}: counts differ after stop {stop}"


def test_a_snapshot_without_counts_resumes_and_reports_them_unknown() -> None:
    settings = SamplerSettings(warmup_iterations=30, draws=20)
    seed = np.random.SeedSequence(16)
    first = Chain(CallCounting(), settings, seed)
    first.run(should_stop=lambda: first.iteration >= 25)
    header, arrays = decode(first.snapshot())
    del header["evaluations"]  # what a chain checkpointed by an earlier release wrote
    header = {k: v for k, v in header.items() if k not in ("format", "version")}
    resumed = Chain.restore(CallCounting(), encode(header, arrays))
    output = resumed.run()
    assert output.completed
    assert output.evaluations is None
    assert Chain.restore(CallCounting(), resumed.snapshot()).evaluation_counts() is None
