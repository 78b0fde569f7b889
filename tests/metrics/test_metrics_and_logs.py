"""The metrics endpoint and the structured logs, against the store, Redis and real workers.

The scrape is parsed with prometheus_client's parser (the reference reader of the Prometheus text
exposition format 0.0.4, from PyPI), and every number is recomputed from the store with plain
SQL/Python: job counts by state, chain wall times (finished_at - started_at), and the evaluation
counts stored on the chain rows, themselves tied to the leapfrog steps read from the job's own
sampler statistics (one gradient per sampling-phase leapfrog step). Queue depth is checked
against what dispatch is known to send: one task message per chain (service/dispatch.py), waiting
while no worker runs.
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


def test_jobs_by_state_and_queue_depth_with_no_worker(tmp_path: Path, redis_url: str) -> None:
    url = f"sqlite:///{(tmp_path / 'metrics.sqlite').resolve()}"
    migrate(url)
    app = create_app({"database_url": url, "broker_url": redis_url, "metrics_ping_timeout": 0.3})
    client = app.test_client()
    for chains in (3, 2):
        assert client.post("/v1/jobs", json=normal_mean(chains=chains)).status_code == 202
    job_id = client.get("/v1/jobs").get_json()["jobs"][0]["id"]
    client.post(f"/v1/jobs/{job_id}/cancel")
    response = client.get("/metrics")
    assert response.status_code == 200
    assert response.content_type.startswith("text/plain; version=0.0.4")
    families = scrape(response.get_data(as_text=True))
    assert sample(families, "drawyard_jobs", state="queued") == 1
    assert sample(families, "drawyard_jobs", state="cancelled") == 1
    assert sample(families, "drawyard_jobs", state="succeeded") == 0
    # Five chain messages were sent; cancelling does not take messages off the queue.
    assert sample(families, "drawyard_queue_messages", queue="drawyard") == 5
    assert sample(families, "drawyard_workers_live") == 0
    assert sample(families, "drawyard_chain_duration_seconds_count") == 0
    app.extensions["drawyard"].close()


@pytest.mark.slow
def test_metrics_match_the_store_and_worker_logs_are_json_lines(
    database_url, redis_url, live_service
) -> None:
    service = live_service(database_url, redis_url, workers=1)
    base = service.base_url
    ids = []
    bodies = [normal_mean(chains=2, warmup=100, draws=150, seed=seed) for seed in (1, 2)]
    bodies.append(normal_mean(chains=2, warmup=100, draws=150, seed=3, method="metropolis"))
    for body in bodies:
        ids.append(requests.post(base + "/v1/jobs", json=body, timeout=30).json()["id"])
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
    durations = np.array([(c.finished_at - c.started_at).total_seconds() for c in chains])
    assert sample(families, "drawyard_chain_duration_seconds_count") == len(chains) == 6
    assert {c.job_id for c in chains} == set(ids)  # the reused job's chains have no times
    # SQLite's date functions resolve whole milliseconds (sqlite.org, "Date And Time
    # Functions"), so each chain's time may be off by up to 1 ms there.
    assert np.isclose(
        sample(families, "drawyard_chain_duration_seconds_sum"),
        durations.sum(),
        rtol=1e-6,
        atol=1e-3 * len(chains),
    )
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
    assert all(c.warmup_gradient_evaluations == c.sampling_gradient_evaluations == 0
               for c in metropolis)  # fmt: skip
    for rate_name, total, group in (
        ("drawyard_gradient_evaluations_per_second", gradients, hamiltonian),
        ("drawyard_log_density_evaluations_per_second", densities, metropolis),
    ):
        seconds = sum((c.finished_at - c.started_at).total_seconds() for c in group)
        rate = sample(families, rate_name)
        # up to 1 ms per chain of SQLite's clock arithmetic, as above
        slack = 1e-3 * len(group)
        assert total > 0 and total / (seconds + slack) <= rate <= total / (seconds - slack)
    assert sample(families, "drawyard_workers_live") == 1
    assert sample(families, "drawyard_queue_messages", queue="drawyard") == 0

    lines = service.workers[0].log_path.read_text().splitlines()
    records = [json.loads(line) for line in lines if line.startswith("{")]
    assert any(r["message"].endswith(" ready.") for r in records)  # Celery's own lines too
    assert all(
        {"time", "level", "logger", "message", "job_id", "chain"} <= r.keys() for r in records
    )
    about_chains = {(r["job_id"], r["chain"]) for r in records if r["chain"] is not None}
    assert about_chains >= {(job_id, chain) for job_id in ids for chain in (1, 2)}
