"""Workers that die, tasks delivered twice, and a chain that keeps killing its worker.

Real processes throughout: gunicorn, Celery workers, the sweeper, Redis and the store, started by
the harness (tests/harness/live_service.py). The reference for the draws is the engine's own
uninterrupted in-process run (worker.runner.run_in_process) for the same body and seed; a chain's
draws depend only on the body and the seed (DEVELOPERS.md, samplers), so any difference in a single
bit is a defect of the resume path.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from service.config import load_settings
from service.dispatch import RUN_CHAIN
from tests.faults.job_watch import (
    StoreView,
    bits,
    get_json,
    http_draws,
    in_process_draws,
    job_ended,
    submit,
    wait_until,
)
from tests.service.bodies import normal_mean
from worker import runner
from worker.celery_app import make_celery
from worker.samplers import snapshot as snapshot_format

FAST_LEASES = {
    "DRAWYARD_LEASE_SECONDS": "3",
    "DRAWYARD_PROGRESS_INTERVAL": "0.25",
    "DRAWYARD_SWEEP_INTERVAL": "0.5",
}


@pytest.mark.slow
def test_a_killed_worker_chain_resumes_on_another_worker_from_a_timed_checkpoint(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """SIGKILL the whole worker (main process and pool) that runs the only chain. Its message
    stays unacknowledged in Redis, which would hand it out again only after the visibility
    timeout (longer than the chain time limit, so not within this test): only the sweeper can
    bring the chain back. Checkpoints here are by time (every 0.5 s; the iteration interval is
    out of reach), so this also shows that a time-triggered snapshot resumes exactly, from the
    state and the records blocks the dead worker's checkpoints left in the store."""
    env = {
        **FAST_LEASES,
        "DRAWYARD_CHECKPOINT_EVERY": "1000000",
        "DRAWYARD_CHECKPOINT_SECONDS": "0.5",
    }
    service = live_service(sqlite_store, redis_url, workers=2, env=env)
    store = StoreView(sqlite_store)
    body = normal_mean(chains=1, warmup=300, draws=30_000, seed=4101)
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]

    def checkpointed():
        (row,) = store.chains(job_id)
        assert row.state in ("queued", "running"), f"chain ended before the kill: {row.state}"
        return row if (row.checkpoint_iteration or 0) >= 1000 else None

    row = wait_until(checkpointed, 120, "a checkpoint", service.logs)
    victim = next(i for i, w in enumerate(service.workers) if row.worker_pid in _group(w.pid))
    service.kill_worker(victim)
    # What the dead worker left: incremental checkpoints (migration 0009), blocks of records
    # from iteration 0 without gaps up to the stored state's iteration, and a state that holds
    # no records (a version-2 snapshot starting its records there), far smaller than they are.
    stored, blocks = store.checkpoint_parts(job_id)
    assert blocks and blocks[0][0] == 0, blocks
    assert all(a[1] == b[0] for a, b in zip(blocks, blocks[1:], strict=False)), blocks
    assert blocks[-1][1] == stored.checkpoint_iteration
    header, arrays = snapshot_format.decode(bytes(stored.checkpoint))
    assert header["records_from"] == header["iteration"] == stored.checkpoint_iteration
    assert arrays["draws"].shape[0] == 0
    assert len(stored.checkpoint) < sum(size for *_, size in blocks)
    job = job_ended(job_url, 300, service.logs)
    assert job["state"] == "succeeded", service.logs()
    (after,) = store.chains(job_id)
    survivor = service.workers[1 - victim]
    assert after.worker_pid in _group(survivor.pid), "the chain did not move to the other worker"
    assert after.attempts == 2 and after.requeues >= 1, service.logs()
    resumed = [
        e.detail["resumed_from_iteration"]
        for e in store.events(job_id)
        if e.kind == "chain_state" and e.state == "running" and "resumed_from_iteration" in (
            e.detail or {}
        )
    ]
    assert len(resumed) == 1 and resumed[0] >= 1000
    assert store.checkpoint_parts(job_id)[1] == []  # the blocks go once the result is stored
    _, got = http_draws(job_url)
    assert np.array_equal(bits(got), bits(in_process_draws(body)))
    # the evaluation counts travelled in the checkpoint: the uninterrupted chain's, exactly
    uninterrupted = runner.start_chain(body, 0).run().evaluations
    assert uninterrupted is not None
    assert job["chains"][0]["evaluations"] == uninterrupted.as_json()
    store.close()


def _group(pid: int) -> set[int]:
    """A worker's main process and its pool processes (everything in its process group)."""
    from tests.harness.processes import descendants_of

    return {pid, *descendants_of(pid)}


@pytest.mark.slow
def test_the_same_chain_task_delivered_twice_records_one_result(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """Send the chain's task again through Celery, for real, while the chain runs and once more
    after it finished: the lease (a fencing token on the chain's row) lets one delivery run it;
    the others are counted and dropped, and exactly one draws array is stored."""
    service = live_service(sqlite_store, redis_url, workers=2, env=FAST_LEASES)
    store = StoreView(sqlite_store)
    celery = make_celery(load_settings({"broker_url": redis_url, "database_url": sqlite_store}))
    queue = load_settings().queue
    body = normal_mean(chains=1, warmup=300, draws=20_000, seed=4102)
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]
    wait_until(
        lambda: store.chains(job_id)[0].state == "running", 60, "the chain to start", service.logs
    )
    celery.send_task(RUN_CHAIN, args=[job_id, 0], queue=queue)
    wait_until(
        lambda: store.chains(job_id)[0].duplicate_deliveries >= 1,
        60,
        "the duplicate to be dropped",
        service.logs,
    )
    job = job_ended(job_url, 300, service.logs)
    assert job["state"] == "succeeded", service.logs()
    celery.send_task(RUN_CHAIN, args=[job_id, 0], queue=queue)
    wait_until(
        lambda: store.chains(job_id)[0].duplicate_deliveries >= 2,
        60,
        "the late duplicate to be dropped",
        service.logs,
    )
    (row,) = store.chains(job_id)
    assert row.attempts == 1 and row.state == "succeeded"
    assert store.draws_rows(job_id) == 1
    events = store.events(job_id)
    assert [e.state for e in events if e.kind == "chain_state"] == ["running", "succeeded"]
    assert sum(e.kind == "duplicate_delivery_dropped" for e in events) >= 2
    assert get_json(job_url)["state"] == "succeeded"
    _, got = http_draws(job_url)
    assert np.array_equal(bits(got), bits(in_process_draws(body)))
    celery.close()
    store.close()


@pytest.mark.slow
def test_a_chain_that_keeps_killing_its_worker_fails_after_bounded_attempts(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """The worker-only drill variable makes chain 2 SIGKILL its pool process at iteration 60,
    every time. With at most 2 attempts the chain ends failed, saying why, the other chain
    finishes, and nothing is tried again afterwards."""
    env = {
        **FAST_LEASES,
        "DRAWYARD_LEASE_SECONDS": "2",
        "DRAWYARD_MAX_ATTEMPTS": "2",
        "DRAWYARD_DRILL_KILL_CHAIN": "2@60",
    }
    service = live_service(sqlite_store, redis_url, workers=2, env=env)
    store = StoreView(sqlite_store)
    job_url = submit(service.base_url, normal_mean(chains=2, warmup=100, draws=400, seed=4103))
    job_id = job_url.rsplit("/", 1)[1]
    job = job_ended(job_url, 180, service.logs)
    assert job["state"] == "failed", service.logs()
    first, second = job["chains"]
    assert first["state"] == "succeeded"
    assert second["state"] == "failed" and "started 2 times" in second["error"]
    assert "chain 2 failed" in job["error"] and "at most 2 attempts" in job["error"]
    attempts = store.chains(job_id)[1].attempts
    assert attempts == 2
    time.sleep(6)  # three lease lengths: a requeue loop would have taken the chain again by now
    assert store.chains(job_id)[1].attempts == attempts
    assert get_json(job_url)["state"] == "failed"
    store.close()
