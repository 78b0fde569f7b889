"""The metrics endpoint and the structured logs: store, Redis, gunicorn and real workers.

The scrape is parsed with prometheus_client's parser (the reference reader of the Prometheus text
exposition format, from PyPI), and every number is recomputed from the store with plain SQL and
Python: job and chain counts by state, chain wall times (finished_at - started_at), and the
evaluation counts stored on the chain rows. Queue depth is checked against what dispatch is known to
send: one task message per chain (service/dispatch.py), waiting while no worker runs. The live test
runs the API and the workers as separate processes sharing one PROMETHEUS_MULTIPROC_DIR, so the
workers' counters reaching the API's scrape is the library's multiprocess mode at work.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np
import pytest
import requests
from prometheus_client.parser import text_string_to_metric_families
from sqlalchemy import create_engine, select
from sqlalchemy.orm import Session

from service.app import create_app
from service.store import migrate
from service.store.models import Chain, Job
from tests.service.bodies import normal_mean


def scrape(text: str) -> dict[str, list]:
    return {family.name: family.samples for family in text_string_to_metric_families(text)}


def sample(families: dict, name: str, **labels: str) -> float:
    for family_samples in families.values():
        for s in family_samples:
            if s.name == name and all(s.labels.get(k) == v for k, v in labels.items()):
                return s.value
    raise AssertionError(f"no sample {name} {labels}")


def sample_or_zero(families: dict, name: str, **labels: str) -> float:
    """A labelled counter appears once it has counted something; before that it is zero."""
    try:
        return sample(families, name, **labels)
    except AssertionError:
        return 0.0


def test_gauges_from_the_store_and_counters_of_this_process(tmp_path: Path, redis_url: str) -> None:
    url = f"sqlite:///{(tmp_path / 'metrics.sqlite').resolve()}"
    migrate(url)
    app = create_app({"database_url": url, "broker_url": redis_url})
    client = app.test_client()
    before = scrape(client.get("/metrics").get_data(as_text=True))
    for chains in (3, 2):
        assert client.post("/v1/jobs", json=normal_mean(chains=chains)).status_code == 202
    job_id = client.get("/v1/jobs").get_json()["jobs"][0]["id"]
    client.post(f"/v1/jobs/{job_id}/cancel")
    # Refusals by problem type: a body that is not JSON, a submission the schema refuses.
    assert client.post("/v1/jobs", data="x", content_type="text/plain").status_code == 415
    assert client.post("/v1/jobs", json={"model": 1}).status_code == 422
    response = client.get("/metrics")
    assert response.status_code == 200
    assert response.content_type.startswith("text/plain; version=0.0.4")
    after = scrape(response.get_data(as_text=True))
    assert sample(after, "drawyard_jobs", state="queued") == 1
    assert sample(after, "drawyard_jobs", state="cancelled") == 1
    assert sample(after, "drawyard_jobs", state="succeeded") == 0
    assert sample(after, "drawyard_chains", state="queued") == 3  # the cancelled job's: cancelled
    # Five chain messages were sent; cancelling does not take messages off the queue.
    assert sample(after, "drawyard_queue_messages", queue="drawyard") == 5

    def grew(name: str, **labels: str) -> float:
        return sample_or_zero(after, name, **labels) - sample_or_zero(before, name, **labels)

    assert grew("drawyard_jobs_submitted_total") == 2
    assert grew("drawyard_jobs_refused_total", problem="unsupported-media-type") == 1
    assert grew("drawyard_jobs_refused_total", problem="invalid-submission") == 1
    route = {"route": "/v1/jobs", "method": "POST"}
    assert grew("drawyard_http_requests_total", status="202", **route) == 2
    assert grew("drawyard_http_requests_total", status="422", **route) == 1
    assert grew("drawyard_http_request_duration_seconds_count", **route) == 4
    assert grew("drawyard_http_request_duration_seconds_bucket", le="+Inf", **route) == 4
    app.extensions["drawyard"].close()


def log_records(path: Path) -> list[dict]:
    """Every line of a process's log as JSON; a line that is not JSON fails the test."""
    lines = [line for line in path.read_text().splitlines() if line.strip()]
    assert lines, f"{path} is empty"
    return [json.loads(line) for line in lines]


@pytest.mark.slow
def test_metrics_match_the_store_and_every_process_logs_json_lines(
    database_url, redis_url, live_service
) -> None:
    service = live_service(database_url, redis_url, workers=1)
    base = service.base_url
    ids = []
    bodies = [normal_mean(chains=2, warmup=100, draws=150, seed=seed) for seed in (1, 2)]
    bodies.append(normal_mean(chains=2, warmup=100, draws=150, seed=3, method="metropolis"))
    for number, body in enumerate(bodies):
        answer = requests.post(base + "/v1/jobs", json=body, timeout=30,
                               headers={"X-Request-Id": f"submission-{number}"})
        assert answer.headers["X-Request-Id"] == f"submission-{number}"
        ids.append(answer.json()["id"])
    deadline = time.monotonic() + 180
    while any(
        requests.get(f"{base}/v1/jobs/{i}", timeout=30).json()["state"] != "succeeded" for i in ids
    ):
        assert time.monotonic() < deadline, service.logs()
        time.sleep(0.3)
    # The same body again returns the earlier result: its copied chains ran on no worker.
    reused = requests.post(base + "/v1/jobs", json=bodies[0], timeout=30).json()
    assert reused["reused_from"] == ids[0] and reused["state"] == "succeeded"

    families = scrape(requests.get(base + "/metrics", timeout=30).text)
    engine = create_engine(database_url)
    with Session(engine) as session:
        states = session.scalars(select(Job.state)).all()
        chains = session.scalars(
            select(Chain).where(Chain.state == "succeeded", Chain.started_at.is_not(None))
        ).all()
        methods = {job.id: job.settings["method"] for job in session.scalars(select(Job))}
    engine.dispose()
    assert sample(families, "drawyard_jobs", state="succeeded") == states.count("succeeded") == 4
    assert sample(families, "drawyard_jobs_submitted_total") == len(states) == 4
    # Counted in the worker's processes, read by the API's scrape: the reused job was closed by no
    # worker, so three jobs and six chains.
    assert sample(families, "drawyard_jobs_finished_total", state="succeeded") == 3
    assert sample(families, "drawyard_chains_finished_total", state="succeeded") == len(chains) == 6
    durations = np.array([(c.finished_at - c.started_at).total_seconds() for c in chains])
    assert sample(families, "drawyard_chain_duration_seconds_count") == 6
    assert {c.job_id for c in chains} == set(ids)  # the reused job's chains have no times
    # The worker observes finished_at - started_at of the very values it stores; PostgreSQL keeps
    # microseconds, SQLite's stored text too, so they agree to rounding.
    assert np.isclose(sample(families, "drawyard_chain_duration_seconds_sum"), durations.sum(),
                      rtol=1e-9, atol=1e-5)
    for bound in (1.0, 5.0, 60.0):
        expected = int((durations <= bound).sum())
        assert sample(families, "drawyard_chain_duration_seconds_bucket", le=str(bound)) == expected
    for job_id in ids[:2]:
        stats = requests.get(f"{base}/v1/jobs/{job_id}/sampler-stats", timeout=30).json()
        column = stats["statistics"].index("gradient_calls")
        steps = [sum(row[column] for row in chain["draws"]) for chain in stats["chains"]]
        stored = sorted((c.chain_index, c.sampling_gradient_evaluations) for c in chains
                        if c.job_id == job_id)  # fmt: skip
        assert [n for _, n in stored] == steps  # one gradient per sampling leapfrog step
    hamiltonian = [c for c in chains if methods[c.job_id] == "nuts"]
    metropolis = [c for c in chains if methods[c.job_id] == "metropolis"]
    assert len(hamiltonian) == 4 and len(metropolis) == 2
    gradients = sum(c.warmup_gradient_evaluations + c.sampling_gradient_evaluations
                    for c in hamiltonian)  # fmt: skip
    densities = sum(c.warmup_log_density_evaluations + c.sampling_log_density_evaluations
                    for c in metropolis)  # fmt: skip
    for kind, total, group in (("gradient", gradients, hamiltonian),
                               ("log_density", densities, metropolis)):
        assert total > 0
        assert sample(families, "drawyard_model_evaluations_total", kind=kind) == total
        seconds = sum((c.finished_at - c.started_at).total_seconds() for c in group)
        assert np.isclose(sample(families, "drawyard_evaluating_chain_seconds_total", kind=kind),
                          seconds, rtol=1e-9, atol=1e-5)
    assert sample(families, "drawyard_queue_messages", queue="drawyard") == 0
    route = {"route": "/v1/jobs", "method": "POST", "status": "202"}
    assert sample(families, "drawyard_http_requests_total", **route) == 4

    # Every process writes JSON lines: the API (gunicorn's own lines and the access lines), the
    # worker (Celery's own lines too) and the sweeper.
    api = log_records(service.api.log_path)
    assert any(r["logger"] == "gunicorn.error" for r in api)
    access = [r for r in api if r["logger"] == "drawyard.access"]
    submitted = [r for r in access if r.get("route") == "/v1/jobs" and r["method"] == "POST"]
    assert [r["request_id"] for r in submitted[:3]] == [f"submission-{n}" for n in range(3)]
    accepted = [r for r in api if r.get("event") == "submission_accepted"]
    assert {r["job_id"] for r in accepted} >= set(ids)
    assert log_records(service.sweeper.log_path)
    records = log_records(service.workers[0].log_path)
    assert any(r["message"].endswith(" ready.") for r in records)
    assert all(
        {"time", "level", "logger", "message", "request_id", "job_id", "chain"} <= r.keys()
        for r in records
    )
    about_chains = {(r["job_id"], r["chain"]) for r in records if r["chain"] is not None}
    assert about_chains >= {(job_id, chain) for job_id in ids for chain in (1, 2)}
    # The request id travels with the tasks: every worker line about a job's chains names the
    # request that submitted it.
    for number, job_id in enumerate(ids):
        lines = [r for r in records if r["job_id"] == job_id and r["chain"] is not None]
        assert lines and {r["request_id"] for r in lines} == {f"submission-{number}"}
