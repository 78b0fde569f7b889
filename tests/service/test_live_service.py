"""End to end with real parts: gunicorn serving the app, real Celery worker processes, a real Redis
broker, and a real store (SQLite and PostgreSQL), all started by the harness's fixtures.

External references: the engine's own in-process run (worker.runner.run_in_process, in a fresh
process) for bitwise
equality of draws; SHA-256 as specified in FIPS 180-4 (Python's hashlib) for the audit hashes;
17 significant digits round-trip an IEEE 754 double exactly (common practice; IEEE 754-2008
section 5.12.2) so text read back must equal the stored bits; the closed-form posterior of a normal
mean with known variance (Gelman et al. 2013, BDA3 section 2.5) for a sanity check of the numbers.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import signal
import time
from pathlib import Path

import numpy as np
import pytest
import requests
from sqlalchemy import create_engine, select
from sqlalchemy.orm import Session

from service.canonical import jcs_json
from service.store.models import Chain, Event
from tests.harness.in_process import in_process
from tests.service.bodies import normal_mean, posterior_mean_sd
from tests.service.response_contract import check_requests

TERMINAL = ("succeeded", "failed", "cancelled", "timed_out")
REPO_ROOT = Path(__file__).resolve().parents[2]


def call(method: str, url: str, **kwargs) -> tuple[requests.Response, object]:
    response = requests.request(method, url, timeout=60, **kwargs)
    return response, check_requests(response)


def submit(base: str, body: dict) -> str:
    response, job = call("POST", base + "/v1/jobs", json=body)
    assert response.status_code == 202, job
    return base + response.headers["Location"]


def wait_for(job_url: str, until, timeout: float = 180.0, what: str = "") -> dict:
    deadline = time.monotonic() + timeout
    while True:
        _, job = call("GET", job_url)
        if until(job):
            return job
        assert time.monotonic() < deadline, f"gave up waiting for {what}: {job}"
        time.sleep(0.2)


def finished(job_url: str, service, timeout: float = 180.0) -> dict:
    job = wait_for(job_url, lambda j: j["state"] in TERMINAL, timeout, "the job to end")
    assert job["state"] == "succeeded", f"{job}\n{service.logs()}"
    return job


def json_draws(payload: dict) -> np.ndarray:
    special = {"NaN": np.nan, "Infinity": np.inf, "-Infinity": -np.inf}
    return np.array(
        [
            [
                [special.get(v, v) if isinstance(v, str) else v for v in row]
                for row in chain["draws"]
            ]
            for chain in payload["chains"]
        ],
        dtype=np.float64,
    )


def bits(values: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(values, dtype="<f8").view("<u8")


def chains_in_store(database_url: str, job_id: str) -> list[Chain]:
    engine = create_engine(database_url)
    try:
        with Session(engine) as session:
            return list(
                session.scalars(
                    select(Chain).where(Chain.job_id == job_id).order_by(Chain.chain_index)
                ).all()
            )
    finally:
        engine.dispose()


def kill_first_chain_after(
    service, database_url: str, job_id: str, iteration: int, timeout: float = 240.0
) -> None:
    """SIGKILL the worker process running the job's first chain once that chain has a checkpoint
    at or past ``iteration``; fail (with the service's logs) if it ends first or time runs out."""
    deadline = time.monotonic() + timeout
    while True:
        first = chains_in_store(database_url, job_id)[0]
        if first.checkpoint_iteration is not None and first.checkpoint_iteration >= iteration:
            break
        assert first.state in ("queued", "running"), f"chain 1 ended before the kill: {first.state}"
        assert time.monotonic() < deadline, service.logs()
        time.sleep(0.1)
    os.kill(first.worker_pid, signal.SIGKILL)


def events_in_store(database_url: str, job_id: str) -> list[Event]:
    engine = create_engine(database_url)
    try:
        with Session(engine) as session:
            return list(
                session.scalars(
                    select(Event).where(Event.job_id == job_id).order_by(Event.id)
                ).all()
            )
    finally:
        engine.dispose()


@pytest.mark.slow
def test_draws_over_http_are_bitwise_the_in_process_draws(
    database_url: str, redis_url: str, live_service
) -> None:
    """Two worker processes run the two chains at the same time; what comes back over HTTP (JSON
    and CSV) is bit for bit what the engine gives in process for the same body and seed."""
    service = live_service(database_url, redis_url, workers=2)
    body = normal_mean(chains=2, warmup=300, draws=2500, seed=77)
    job_url = submit(service.base_url, body)
    job = finished(job_url, service)
    expected = in_process(body)

    _, draws = call("GET", job_url + "/draws")
    got = json_draws(draws)
    assert draws["quantities"] == expected["names"]
    assert got.shape == expected["draws"].shape
    assert np.array_equal(bits(got), bits(expected["draws"]))

    response = requests.get(job_url + "/draws", headers={"Accept": "text/csv"}, timeout=60)
    text = check_requests(response)
    table = np.loadtxt(io.StringIO(text), delimiter=",", skiprows=1)
    assert text.splitlines()[0] == "chain,draw," + ",".join(expected["names"])
    for c in range(2):
        rows = table[table[:, 0] == c + 1]
        assert np.array_equal(rows[:, 1], np.arange(1, 2501))
        assert np.array_equal(bits(rows[:, 2:]), bits(expected["draws"][c]))

    _, thinned = call("GET", job_url + "/draws?chains=2&thin=7&quantities=mu")
    assert np.array_equal(bits(json_draws(thinned)[0]), bits(expected["draws"][1, ::7]))

    _, stats = call("GET", job_url + "/sampler-stats?format=json")
    for c, chain_stats in enumerate(expected["stats"]):
        table = np.asarray(stats["chains"][c]["draws"], dtype=np.float64)
        for column, name in enumerate(stats["statistics"]):
            assert np.array_equal(table[:, column], np.asarray(chain_stats[name], np.float64))

    _, audit = call("GET", job_url + "/audit")
    for c in range(2):
        digest = hashlib.sha256(np.ascontiguousarray(expected["draws"][c], "<f8").tobytes())
        assert audit["chains"][c]["draws_sha256"] == digest.hexdigest()
    # RFC 8785 canonical JSON (tests/canonical/test_rfc8785.py checks it on the RFC's examples)
    assert audit["hashes"]["model"] == hashlib.sha256(jcs_json(body["model"])).hexdigest()
    assert audit["seed"] == 77 and audit["settings"]["draws"] == 2500
    assert audit["software"]["finish"]["numpy"] == np.__version__

    # In parallel: two different worker processes, running at overlapping times.
    rows = chains_in_store(database_url, job["id"])
    assert len({row.worker_pid for row in rows}) == 2, service.logs()
    first, second = rows
    assert first.started_at < second.finished_at and second.started_at < first.finished_at
    assert [row.attempts for row in rows] == [1, 1]

    _, summary = call("GET", job_url + "/summary")
    _, diagnostics = call("GET", job_url + "/diagnostics")
    assert summary["quantities"] == expected["summary"]
    assert diagnostics["verdict"] == expected["verdict"] == job["verdict"]
    mean, _ = posterior_mean_sd()
    record = summary["quantities"][0]
    assert abs(record["mean"] - mean) < 5 * record["mean_error"]


def test_cancel_stops_running_chains_within_seconds(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    service = live_service(
        sqlite_store, redis_url, workers=2, env={"DRAWYARD_PROGRESS_INTERVAL": "0.25"}
    )
    body = normal_mean(chains=2, warmup=500, draws=90_000, seed=5)
    job_url = submit(service.base_url, body)
    wait_for(
        job_url,
        lambda j: all(c["state"] == "running" and c["iteration"] > 0 for c in j["chains"]),
        what="both chains to report progress",
    )
    response, cancelled = call("POST", job_url + "/cancel")
    assert response.status_code == 200 and cancelled["cancel_requested"]
    asked = time.monotonic()
    job = wait_for(job_url, lambda j: j["state"] in TERMINAL, 30, "the cancelled job to end")
    stopped_after = time.monotonic() - asked
    assert job["state"] == "cancelled", service.logs()
    assert [c["state"] for c in job["chains"]] == ["cancelled", "cancelled"]
    assert all(c["iteration"] < c["iterations_total"] for c in job["chains"])
    assert stopped_after < 30
    _, audit = call("GET", job_url + "/audit")
    states = [(e["kind"], e["chain"], e["state"]) for e in audit["events"]]
    assert ("chain_state", 1, "cancelled") in states and ("chain_state", 2, "cancelled") in states
    assert states[-1] == ("job_state", None, "cancelled")
    response, _ = call("GET", job_url + "/draws")
    assert response.status_code == 409


@pytest.mark.slow
def test_a_chain_outliving_the_redelivery_timeout_is_not_run_twice(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """The broker's visibility timeout is cut to 2 s and its redelivery sweep to every second, so
    Redis hands the unacknowledged chain message to the idle second worker while the first is
    still running it; the lease drops the duplicate, and the chain runs exactly once."""
    service = live_service(
        sqlite_store,
        redis_url,
        workers=2,
        env={
            "DRAWYARD_REDELIVERY_TIMEOUT": "2",
            "DRAWYARD_BROKER_LIBRARY_OPTIONS": json.dumps(
                {"unacked_restore_interval": 1, "unacked_restore_throttle": 1}
            ),
        },
    )
    # 99,500 draws (500 short of the default cap on warm-up plus draws) keep the chain running well
    # past the 2 s visibility timeout on a quiet machine: 40,000 took 2.5 s, too short to prove it.
    body = normal_mean(chains=1, warmup=500, draws=99_500, seed=9)
    job_url = submit(service.base_url, body)
    job = finished(job_url, service, timeout=300)
    (row,) = chains_in_store(sqlite_store, job["id"])
    assert (row.finished_at - row.started_at).total_seconds() > 4, "chain too short to test"
    assert row.duplicate_deliveries >= 1, "the broker never redelivered: test proves nothing"
    assert row.attempts == 1
    runs = [
        e
        for e in events_in_store(sqlite_store, job["id"])
        if e.kind == "chain_state" and e.state == "running"
    ]
    assert len(runs) == 1
    _, audit = call("GET", job_url + "/audit")
    assert audit["chains"][0]["attempts"] == 1
    assert audit["chains"][0]["duplicate_deliveries"] == row.duplicate_deliveries
    _, draws = call("GET", job_url + "/draws")
    assert json_draws(draws).shape == (1, 99_500, 1)


@pytest.mark.slow
def test_a_chain_whose_worker_dies_resumes_from_its_checkpoint(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """SIGKILL the pool process running the only chain. Its worker rejects the message back to the
    queue (reject on worker lost); the next delivery finds the lease still held, looks again once
    it lapses, takes the chain over and resumes from the last checkpoint. The draws are bit for
    bit those of an uninterrupted in-process run."""
    service = live_service(
        sqlite_store,
        redis_url,
        workers=2,
        env={
            "DRAWYARD_LEASE_SECONDS": "3",
            "DRAWYARD_PROGRESS_INTERVAL": "0.25",
            "DRAWYARD_CHECKPOINT_EVERY": "2000",
        },
    )
    body = normal_mean(chains=1, warmup=500, draws=24_000, seed=31)
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]
    kill_first_chain_after(service, sqlite_store, job_id, 4000, timeout=120)
    job = finished(job_url, service, timeout=300)
    (after,) = chains_in_store(sqlite_store, job_id)
    assert after.attempts == 2, service.logs()
    resumed = [
        e.detail["resumed_from_iteration"]
        for e in events_in_store(sqlite_store, job_id)
        if e.kind == "chain_state"
        and e.state == "running"
        and e.detail
        and "resumed_from_iteration" in e.detail
    ]
    assert len(resumed) == 1 and resumed[0] >= 4000
    assert job["chains"][0]["attempts"] == 2
    expected = in_process(body)
    _, draws = call("GET", job_url + "/draws")
    assert np.array_equal(bits(json_draws(draws)), bits(expected["draws"]))


def test_the_serverless_filesystem_broker_runs_a_job(sqlite_store: str, live_service, tmp_path):
    """The embedded default for a machine without Redis: kombu's filesystem transport."""
    folder = tmp_path / "broker"
    service = live_service(
        sqlite_store, "filesystem://", workers=1, env={"DRAWYARD_BROKER_FOLDER": str(folder)}
    )
    _, ready = call("GET", service.base_url + "/v1/health/ready")
    assert ready["checks"]["broker"]["ok"] and "one machine" in ready["checks"]["broker"]["detail"]
    body = normal_mean(chains=2, warmup=100, draws=200, seed=3)
    job_url = submit(service.base_url, body)
    finished(job_url, service)
    _, draws = call("GET", job_url + "/draws")
    assert np.array_equal(bits(json_draws(draws)), bits(in_process(body)["draws"]))


def test_a_chain_past_its_time_limit_ends_timed_out_and_says_why(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """The full promise (draws kept, marked partial): tests/faults/test_wall_time_limit.py."""
    service = live_service(
        sqlite_store,
        redis_url,
        workers=2,
        env={"DRAWYARD_CHAIN_TIME_LIMIT": "2", "DRAWYARD_PROGRESS_INTERVAL": "0.25"},
    )
    job_url = submit(service.base_url, normal_mean(chains=1, warmup=500, draws=90_000, seed=8))
    job = wait_for(job_url, lambda j: j["state"] in TERMINAL, 120, "the job to end")
    assert job["state"] == "timed_out" and job["partial"] is True, service.logs()
    (chain,) = job["chains"]
    assert chain["state"] == "timed_out" and "wall-time limit of 2 s" in chain["error"]
    assert 0 < chain["iteration"] < chain["iterations_total"]
    assert "wall-time limit of 2 s" in job["error"]
