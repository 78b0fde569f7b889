"""A chain task's start: from its checkpoint when it has one, from scratch when that is unusable.

Reference: the engine's own uninterrupted run (worker.runner.start_chain then run) for the same
body and seed; a chain's draws depend only on the body and the seed (DEVELOPERS.md, samplers).
"""

from __future__ import annotations

import numpy as np

from service.chain_work import Lease, _start_or_resume
from tests.service.bodies import normal_mean
from worker import runner


def lease_for(body: dict, checkpoint: bytes | None) -> Lease:
    return Lease(1, "0" * 32, 0, "t", 1, checkpoint, body)


def test_a_checkpoint_resumes_and_a_broken_one_starts_over_to_the_same_draws() -> None:
    body = normal_mean(chains=1, warmup=100, draws=300, seed=12)
    uninterrupted = runner.start_chain(body, 0).run()
    expected = uninterrupted.values
    saved: list[bytes] = []
    stopped = runner.start_chain(body, 0).run(
        checkpoint=saved.append, checkpoint_every=150, should_stop=lambda: len(saved) >= 1
    )
    assert not stopped.completed and saved
    resumed = _start_or_resume(lease_for(body, saved[-1])).run()
    assert np.array_equal(resumed.values.view("u8"), expected.view("u8"))
    # the counts travel in the checkpoint: the resumed chain reports the uninterrupted total
    assert resumed.evaluations == uninterrupted.evaluations is not None
    fresh = _start_or_resume(lease_for(body, b"not a snapshot")).run()
    assert np.array_equal(fresh.values.view("u8"), expected.view("u8"))
    assert fresh.evaluations == uninterrupted.evaluations
