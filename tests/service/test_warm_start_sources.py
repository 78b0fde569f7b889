"""Which earlier jobs a warm start may name (docs/registry.md, "Warm starts": the earlier job must
have succeeded). A job stopped at its wall-time limit is refused like a failed one: its chains ended
mid-run, during warm-up for some, and an adaptation that did not finish is not a state to trust.
A reused job is a succeeded job whose chains hold its source's adapted state, so it may be named.
The timed-out job is made by the worker's own storing path (service.chain_work.store_result)
after the engine stopped each chain; real SQLite store and Redis broker.
"""

from __future__ import annotations

from flask import Flask
from sqlalchemy import select

from service.finishing import finish
from service.store.models import Chain, Job
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from tests.service.store_probe import row_counts
from tests.service.test_partial_finish import WARMUP, _submit, _time_out
from tests.service.test_registry_views import call, run_to_the_end


def _warm(job_id: str, **sampler) -> dict:
    return {**normal_mean(seed=61, **sampler), "warm_start": {"job": job_id}}


def test_a_timed_out_or_cancelled_job_is_not_a_warm_start(app: Flask, queue) -> None:
    runtime = app.extensions["drawyard"]
    stopped = _submit(app, normal_mean(chains=2, warmup=WARMUP, draws=500, seed=62))
    _time_out(app, stopped, 0, WARMUP + 30)
    _time_out(app, stopped, 1, WARMUP + 20)
    assert finish(runtime, stopped) == "timed_out"
    client = app.test_client()
    cancelled = client.post("/v1/jobs", json=normal_mean(seed=63)).get_json()["id"]
    assert client.post(f"/v1/jobs/{cancelled}/cancel").get_json()["state"] == "cancelled"
    queue.client.delete(queue.name)
    for job_id, state in ((stopped, "timed_out"), (cancelled, "cancelled")):
        before = row_counts(app)
        response = client.post("/v1/jobs", json=_warm(job_id))
        problem = check_flask("POST", "/v1/jobs", response)
        assert response.status_code == 422, problem
        (error,) = problem["errors"]
        assert error["pointer"] == "/warm_start/job" and state in error["message"]
        assert row_counts(app) == before and queue.length() == 0


def test_a_reused_job_is_a_warm_start_with_its_sources_state(app: Flask, queue) -> None:
    client = app.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=64)
    _, first = call(client, "POST", "/v1/jobs", body)
    run_to_the_end(app, first["id"], 2)
    _, copy = call(client, "POST", "/v1/jobs", body)
    assert copy["reused_from"] == first["id"]
    response, warm = call(client, "POST", "/v1/jobs", _warm(copy["id"]))
    assert response.status_code == 202 and warm["warm_start_from"] == copy["id"]
    with app.extensions["drawyard"].sessions() as session:
        records = session.scalars(
            select(Chain.adapted).where(Chain.job_id == first["id"]).order_by(Chain.chain_index)
        ).all()
        stored = session.scalar(select(Job.body).where(Job.id == warm["id"]))
    assert stored["warm_start"] == {"job": copy["id"], "chains": list(records)}
