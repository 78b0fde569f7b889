"""Metrics benchmark: what one scrape of /metrics costs next to a plain health request.

A SQLite store holding 10,000 jobs of 4 chains each (copies of one real submission's rows, states
spread over every job state), served by gunicorn (one process, the production gunicorn_conf.py)
with the metrics folder of the multiprocess mode. GET /metrics and GET /v1/health/live are timed
alternately, 40 of each after 5 of each to warm up; the figure is the ratio of the medians. The
scrape runs one GROUP BY over the jobs, one over the chains and one LLEN pipeline (none here: the
broker is the filesystem transport), and reads the counter files; it reads no chain row.
Run with `make bench` (or `python -m tests.bench metrics`).
"""

from __future__ import annotations

import statistics
import tempfile
import time
import uuid
from pathlib import Path

import requests
from sqlalchemy import create_engine, insert, select

from service.app import create_app
from service.local_stack import (
    api_ready,
    free_port,
    metrics_env,
    service_env,
    start_api,
    wait_until,
)
from service.store import migrate
from service.store.models import JOB_STATES, Chain, Job
from tests.service.bodies import normal_mean

JOBS = 10_000
CHAINS = 4
WARM_UP, REPEATS = 5, 40


def filled_store(folder: Path) -> str:
    """A store with JOBS jobs of CHAINS chains, copied from one job submitted the usual way."""
    url = f"sqlite:///{folder / 'store.sqlite'}"
    migrate(url)
    broker = folder / "broker"
    broker.mkdir()
    app = create_app({"database_url": url, "broker_url": "filesystem://",
                      "broker_folder": str(broker), "max_active_jobs": 0})
    assert app.test_client().post("/v1/jobs", json=normal_mean(chains=CHAINS)).status_code == 202
    app.extensions["drawyard"].close()
    engine = create_engine(url)
    with engine.begin() as connection:
        job = dict(connection.execute(select(Job.__table__)).mappings().one())
        chains = [dict(r) for r in connection.execute(select(Chain.__table__)).mappings()]
        job_rows, chain_rows = [], []
        for number in range(1, JOBS):
            job_id = uuid.uuid4().hex
            state = JOB_STATES[number % len(JOB_STATES)]
            job_rows.append({**job, "seq": None, "id": job_id, "state": state,
                             "request_sha256": uuid.uuid4().hex * 2})
            chain_rows += [{**c, "id": None, "job_id": job_id, "state": state} for c in chains]
        for row in job_rows:
            row.pop("seq")
        for row in chain_rows:
            row.pop("id")
        connection.execute(insert(Job.__table__), job_rows)
        connection.execute(insert(Chain.__table__), chain_rows)
    engine.dispose()
    return url


def median_seconds(session: requests.Session, urls: list[str]) -> dict[str, float]:
    times: dict[str, list[float]] = {url: [] for url in urls}
    for round_number in range(WARM_UP + REPEATS):
        for url in urls:
            started = time.perf_counter()
            answer = session.get(url, timeout=60)
            elapsed = time.perf_counter() - started
            assert answer.status_code == 200, answer.text
            if round_number >= WARM_UP:
                times[url].append(elapsed)
    return {url: statistics.median(values) for url, values in times.items()}


def main() -> None:
    with tempfile.TemporaryDirectory(prefix="drawyard-bench-metrics-") as scratch:
        folder = Path(scratch)
        url = filled_store(folder)
        env = service_env(url, "filesystem://", {
            **metrics_env(folder / "metrics"), "DRAWYARD_BROKER_FOLDER": str(folder / "broker"),
        })
        port = free_port()
        api = start_api(port, env, folder / "api.log")
        try:
            base = f"http://127.0.0.1:{port}"
            wait_until(api_ready(base), [api], 90, "the API")
            with requests.Session() as session:
                jobs = session.get(f"{base}/metrics", timeout=60).text
                assert "drawyard_jobs" in jobs
                health, scrape = f"{base}/v1/health/live", f"{base}/metrics"
                medians = median_seconds(session, [health, scrape])
        finally:
            api.stop()
    print(f"store: {JOBS} jobs, {JOBS * CHAINS} chains (SQLite); gunicorn, 1 process")
    print(f"GET /v1/health/live  median {medians[health] * 1000:8.2f} ms")
    print(f"GET /metrics         median {medians[scrape] * 1000:8.2f} ms")
    print(f"scrape / health: {medians[scrape] / medians[health]:.1f}")


if __name__ == "__main__":
    main()
