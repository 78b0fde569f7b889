"""The broker losing its queues, and the API process dying, in the middle of a job.

Real gunicorn, Celery workers, sweeper, Redis (no persistence, so a restart empties it) and store.
Reference for the draws: the engine's uninterrupted in-process run (worker.runner.run_in_process)
for the same body and seed, compared bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest

from service.local_stack import api_ready, start_api
from service.local_stack import wait_until as wait_for_child
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

SWEEPING = {
    "DRAWYARD_LEASE_SECONDS": "3",
    "DRAWYARD_PROGRESS_INTERVAL": "0.25",
    "DRAWYARD_SWEEP_INTERVAL": "0.5",
    "DRAWYARD_REQUEUE_QUEUED_AFTER": "5",
    "DRAWYARD_CHECKPOINT_SECONDS": "0.5",
}


@pytest.mark.slow
def test_redis_restarted_empty_mid_job_the_sweeper_requeues_and_the_job_completes(
    sqlite_store: str, redis_server, redis_url: str, live_service
) -> None:
    """Three chains on two single-process workers: two run, one waits in Redis. Then one worker is
    SIGKILLed and Redis is restarted without persistence, so the waiting chain's message and the
    killed chain's unacknowledged one are both gone. The sweeper must find the chain whose lease
    expired and the chain that waited too long, and send both again."""
    service = live_service(sqlite_store, redis_url, workers=2, env=SWEEPING)
    store = StoreView(sqlite_store)
    body = normal_mean(chains=3, warmup=300, draws=12_000, seed=4201)
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]

    def two_running() -> bool:
        rows = store.chains(job_id)
        running = [r for r in rows if r.state == "running" and (r.checkpoint_iteration or 0) > 0]
        return len(running) == 2 and sum(r.state == "queued" for r in rows) == 1

    wait_until(two_running, 120, "two chains checkpointed and one queued", service.logs)
    service.kill_worker(0)
    redis_server.restart()
    job = job_ended(job_url, 300, service.logs)
    assert job["state"] == "succeeded", service.logs()
    rows = store.chains(job_id)
    assert sum(r.requeues for r in rows) >= 2, "the sweeper did not requeue: test proves nothing"
    assert any(e.kind == "chain_requeued" for e in store.events(job_id))
    assert store.draws_rows(job_id) == 3
    _, got = http_draws(job_url)
    assert np.array_equal(bits(got), bits(in_process_draws(body)))
    store.close()


@pytest.mark.slow
def test_the_api_killed_and_restarted_mid_job_loses_nothing(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """SIGKILL gunicorn while two jobs are in flight, start it again on the same port: both jobs
    are still there, finish, and give the in-process draws bit for bit."""
    service = live_service(sqlite_store, redis_url, workers=2, env=SWEEPING)
    store = StoreView(sqlite_store)
    bodies = [normal_mean(chains=2, warmup=200, draws=4000, seed=4202 + i) for i in range(2)]
    urls = [submit(service.base_url, body) for body in bodies]
    wait_until(
        lambda: get_json(urls[0])["state"] == "running", 60, "the first job to run", service.logs
    )
    port = int(service.base_url.rsplit(":", 1)[1])
    service.api.kill()
    service.api = start_api(port, service.env, service.log_dir / "api-restarted.log")
    wait_for_child(api_ready(service.base_url), [service.api], 60, "the restarted API")
    for url, body in zip(urls, bodies, strict=True):
        job = job_ended(url, 300, service.logs)
        assert job["state"] == "succeeded", service.logs()
        _, got = http_draws(url)
        assert np.array_equal(bits(got), bits(in_process_draws(body)))
    states = store.job_states()
    assert sorted(states) == sorted(u.rsplit("/", 1)[1] for u in urls)
    store.close()
