"""Snapshot and restore: a chain resumed from any iteration makes exactly the uninterrupted draws.

The requirement is exact (bitwise) equality, so the comparison is array_equal, not a tolerance.
Stopping points cover warm-up start, the initial fast stretch, both sides of every window boundary
of a 200-iteration warm-up (windows [30, 40), [40, 60), [60, 100), [100, 180)), the end of warm-up,
and sampling.
"""

from __future__ import annotations

import io

import numpy as np
import pytest

from tests.samplers.targets import Gaussian
from worker.samplers import Chain, SamplerSettings, SnapshotError
from worker.samplers.metric_adaptation import warmup_schedule
from worker.samplers.warm_schedule import WarmStart, warm_schedule

STOPS = [0, 1, 17, 29, 30, 31, 39, 40, 41, 99, 100, 101, 179, 180, 181, 199, 200, 201, 263]


def target() -> Gaussian:
    covariance = np.array([[1.0, 0.6, 0.0], [0.6, 2.0, -0.3], [0.0, -0.3, 0.5]])
    return Gaussian(np.array([0.5, -1.0, 2.0]), covariance)


def same_output(a, b) -> bool:
    return (
        np.array_equal(a.draws, b.draws)
        and all(np.array_equal(a.stats[k], b.stats[k]) for k in a.stats)
        and all(np.array_equal(a.warmup_stats[k], b.warmup_stats[k]) for k in a.warmup_stats)
        and a.adapted == b.adapted
        and a.completed == b.completed
        # the calls into the model, by phase: a resumed chain reports the uninterrupted total
        and a.evaluations == b.evaluations
        and a.evaluations is not None
    )


def test_schedule_has_the_boundaries_the_stops_straddle() -> None:
    assert warmup_schedule(200).windows == ((30, 40), (40, 60), (60, 100), (100, 180))


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
@pytest.mark.parametrize("metric", ["per_coordinate", "full", "none"])
def test_resume_anywhere_gives_identical_draws(method: str, metric: str) -> None:
    settings = SamplerSettings(
        method=method, preconditioning=metric, warmup_iterations=200, draws=100
    )
    seed = np.random.SeedSequence(77)
    reference = Chain(target(), settings, seed).run()
    for stop in STOPS:
        first = Chain(target(), settings, seed)
        partial = first.run(should_stop=lambda c=first, s=stop: c.iteration >= s)
        assert partial.completed is False
        resumed = Chain.restore(target(), first.snapshot()).run()
        assert same_output(resumed, reference), f"{method}/{metric}: differs after stop {stop}"


def test_checkpoint_blobs_resume_exactly_and_a_snapshot_can_be_resumed_twice() -> None:
    settings = SamplerSettings(warmup_iterations=150, draws=100)
    seed = np.random.SeedSequence(78)
    blobs: list[bytes] = []
    reference = Chain(target(), settings, seed).run(checkpoint=blobs.append, checkpoint_every=40)
    assert len(blobs) == 6  # after iterations 40, 80, ..., 240; none at the end (250)
    for blob in blobs:
        for _ in range(2):
            assert same_output(Chain.restore(target(), blob).run(), reference)


def test_snapshot_is_an_npz_without_pickled_objects() -> None:
    """DEVELOPERS.md: snapshots are .npz archives readable with allow_pickle=False plus JSON."""
    chain = Chain(
        target(), SamplerSettings(warmup_iterations=20, draws=10), np.random.SeedSequence(1)
    )
    chain.run()
    with np.load(io.BytesIO(chain.snapshot()), allow_pickle=False) as archive:
        assert "header_json" in archive.files
        assert all(archive[name].dtype != object for name in archive.files)


def test_restore_rejects_foreign_bytes_and_wrong_dimension() -> None:
    with pytest.raises(SnapshotError):
        Chain.restore(target(), b"not a snapshot")
    blob = Chain(target(), SamplerSettings(), np.random.SeedSequence(2)).snapshot()
    with pytest.raises(SnapshotError, match="dimension"):
        Chain.restore(Gaussian(np.zeros(2), np.eye(2)), blob)


# A warm start's schedule for 200 iterations has one refresh window, [50, 160).
WARM_STOPS = [0, 1, 49, 50, 51, 159, 160, 161, 199, 200, 201, 263]


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
@pytest.mark.parametrize("metric", ["per_coordinate", "full", "none"])
def test_a_warm_started_chain_resumes_anywhere_with_identical_draws(method, metric) -> None:
    assert warm_schedule(200).windows == ((50, 160),)
    covariance = target().covariance
    metropolis = method == "metropolis"
    start = WarmStart(
        metric="full",
        covariance=covariance * 1.2,
        step_size=None if metropolis else 0.6,
        proposal_scale=1.4 if metropolis else None,
        position=np.array([0.3, -1.2, 2.2]),
    )
    settings = SamplerSettings(
        method=method, preconditioning=metric, warmup_iterations=200, draws=100
    )
    seed = np.random.SeedSequence(79)
    reference = Chain(target(), settings, seed, warm_start=start).run()
    for stop in WARM_STOPS:
        first = Chain(target(), settings, seed, warm_start=start)
        partial = first.run(should_stop=lambda c=first, s=stop: c.iteration >= s)
        assert partial.completed is False
        resumed = Chain.restore(target(), first.snapshot())
        assert resumed.schedule == first.schedule
        assert same_output(resumed.run(), reference), f"{method}/{metric}: differs after {stop}"


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
def test_incremental_checkpoints_resume_exactly_from_the_state_and_every_block(method) -> None:
    """Each incremental checkpoint carries only the records since the one before; the state of
    checkpoint k with blocks 0..k resumes exactly, and a resumed chain's next checkpoints carry on
    from where it was restored."""
    settings = SamplerSettings(method=method, warmup_iterations=150, draws=100)
    seed = np.random.SeedSequence(80)
    taken: list = []
    reference = Chain(target(), settings, seed).run(
        checkpoint=taken.append, checkpoint_every=40, incremental=True
    )
    assert [(c.start, c.iteration) for c in taken] == [(40 * k, 40 * k + 40) for k in range(6)]
    for k, checkpoint in enumerate(taken):
        blocks = [c.records for c in taken[: k + 1]]
        assert same_output(Chain.restore(target(), checkpoint.state, blocks).run(), reference)
    resumed = Chain.restore(target(), taken[2].state, [c.records for c in taken[:3]])
    later: list = []
    resumed.run(checkpoint=later.append, checkpoint_every=40, incremental=True)
    assert later[0].start == 120
    blocks = [c.records for c in taken[:3] + later]
    assert same_output(Chain.restore(target(), later[-1].state, blocks).run(), reference)


def test_a_state_without_its_blocks_or_with_a_gap_is_refused() -> None:
    settings = SamplerSettings(warmup_iterations=50, draws=50)
    taken: list = []
    Chain(target(), settings, np.random.SeedSequence(81)).run(
        checkpoint=taken.append, checkpoint_every=20, incremental=True
    )
    with pytest.raises(SnapshotError, match="records end at iteration 0"):
        Chain.restore(target(), taken[1].state)
    with pytest.raises(SnapshotError, match="where 0 was next"):
        Chain.restore(target(), taken[1].state, [taken[1].records])


def test_a_state_is_the_same_size_at_every_checkpoint() -> None:
    """What makes checkpoints linear: the state leaves the records out, so it does not grow."""
    settings = SamplerSettings(warmup_iterations=100, draws=900)
    taken: list = []
    Chain(target(), settings, np.random.SeedSequence(82)).run(
        checkpoint=taken.append, checkpoint_every=100, incremental=True
    )
    sizes = {len(c.state) for c in taken}
    assert max(sizes) - min(sizes) < 64  # the JSON header's digits only
    # and each block holds its 100 iterations, at iteration 200 as at 900
    assert abs(len(taken[-1].records) - len(taken[1].records)) < 64
