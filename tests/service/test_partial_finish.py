"""Finishing a job some of whose chains hit their wall-time limit, in process on a real store.

The app (Flask test client) stores and queues a real job on SQLite and Redis; each chain is then
run here by the engine (worker.runner) and stopped after a chosen number of iterations, stored
through the same path a worker uses when the limit stops it (service.chain_work.store_result),
and the job closed by the finishing step (service.finishing.finish). Which branch a job takes is
the contract in docs/guarantees.md; the numbers come from the engine's own
uninterrupted run of the same body and seed, and numpy's mean of the common prefix (arithmetic).
"""

from __future__ import annotations

import numpy as np
import pytest
from flask import Flask
from sqlalchemy import select

from service.chain_work import ChainMonitor, TimeLimitStop, end_chain, store_result, take_lease
from service.finishing import finish
from service.partial_results import WALL_TIME_CHECK
from service.results import diagnostics_document, summary_document
from service.store.models import Job
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from worker import runner

WARMUP = 20
LIMIT = 7


def _submit(app: Flask, body: dict) -> str:
    response = app.test_client().post("/v1/jobs", json=body)
    assert response.status_code == 202, response.get_json()
    return response.get_json()["id"]


def _stop_after(body: dict, chain_index: int, iterations: int) -> runner.ChainResult:
    done = {"n": 0}

    def should_stop() -> bool:
        done["n"] += 1
        return done["n"] > iterations

    return runner.start_chain(body, chain_index).run(should_stop=should_stop)


def _time_out(app: Flask, job_id: str, chain_index: int, iterations: int) -> None:
    runtime = app.extensions["drawyard"]
    lease = take_lease(runtime, job_id, chain_index)
    assert lease is not None
    result = _stop_after(lease.body, chain_index, iterations)
    assert not result.completed
    stop = TimeLimitStop.of(result, LIMIT)
    assert store_result(runtime, lease, result, ChainMonitor(runtime, lease), stop)


def _job(app: Flask, job_id: str) -> Job:
    with app.extensions["drawyard"].sessions() as session:
        return session.scalars(select(Job).where(Job.id == job_id)).one()


def test_unequal_chains_are_summarised_over_their_common_prefix(app: Flask, queue) -> None:
    body = normal_mean(chains=2, warmup=WARMUP, draws=500, seed=71)
    job_id = _submit(app, body)
    _time_out(app, job_id, 0, WARMUP + 40)
    _time_out(app, job_id, 1, WARMUP + 25)
    assert finish(app.extensions["drawyard"], job_id) == "timed_out"

    job = _job(app, job_id)
    assert job.state == "timed_out" and "first 25 draws of each chain" in job.error
    reference = np.stack([runner.start_chain(body, i).run().values for i in range(2)])
    summary = summary_document(job)
    assert summary["partial"] is True and summary["summarised_draws_per_chain"] == 25
    (mu,) = summary["quantities"]
    assert mu["mean"] == pytest.approx(float(reference[:, :25, 0].mean()), rel=1e-12)
    assert summary["verdict"]["passed"] is False
    assert summary["verdict"]["failed_checks"][0]["check"] == WALL_TIME_CHECK
    assert diagnostics_document(job)["partial"] is True
    assert job.diagnostics["partial"]["draws_per_chain"] == [40, 25]
    assert job.diagnostics["partial"]["time_limit_seconds"] == LIMIT

    client = app.test_client()
    draws = check_flask("GET", f"/v1/jobs/{job_id}/draws", client.get(f"/v1/jobs/{job_id}/draws"))
    assert draws["partial"] is True
    assert [len(c["draws"]) for c in draws["chains"]] == [40, 25]  # each chain as stored
    status = client.get(f"/v1/jobs/{job_id}")
    assert check_flask("GET", f"/v1/jobs/{job_id}", status)["partial"] is True


def test_a_chain_with_too_few_draws_leaves_no_summary_but_the_draws(app: Flask, queue) -> None:
    body = normal_mean(chains=2, warmup=WARMUP, draws=500, seed=72)
    job_id = _submit(app, body)
    _time_out(app, job_id, 0, WARMUP + 30)
    _time_out(app, job_id, 1, WARMUP + 2)
    assert finish(app.extensions["drawyard"], job_id) == "timed_out"

    job = _job(app, job_id)
    assert job.summary is None
    assert "chain 2 has 2 draws, fewer than the 4" in job.error
    assert [f["check"] for f in job.verdict["failed_checks"]] == [WALL_TIME_CHECK]
    client = app.test_client()
    summary = client.get(f"/v1/jobs/{job_id}/summary")
    assert summary.status_code == 409
    check_flask("GET", f"/v1/jobs/{job_id}/summary", summary)
    draws = client.get(f"/v1/jobs/{job_id}/draws")
    assert draws.status_code == 200
    document = check_flask("GET", f"/v1/jobs/{job_id}/draws", draws)
    assert [len(c["draws"]) for c in document["chains"]] == [30, 2]


def test_a_failed_chain_wins_over_a_timed_out_one(app: Flask, queue) -> None:
    body = normal_mean(chains=2, warmup=WARMUP, draws=500, seed=73)
    job_id = _submit(app, body)
    _time_out(app, job_id, 0, WARMUP + 30)
    runtime = app.extensions["drawyard"]
    lease = take_lease(runtime, job_id, 1)
    assert lease is not None and end_chain(runtime, lease, "failed", "RuntimeError: boom")
    assert finish(runtime, job_id) == "failed"
    job = _job(app, job_id)
    assert job.state == "failed" and "chain 2 failed: RuntimeError: boom" in job.error
