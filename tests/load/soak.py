"""The load run: many concurrent readers and 50 slow clients while jobs run, then a burst of jobs.

Everything on loopback: a private Redis, the real API under gunicorn, real Celery workers, the
sweeper, a SQLite store. ``make soak`` runs the full size (200 clients for 60 s, 500 jobs); the
test suite runs a small smoke version (tests/load/test_load_smoke.py). Percentiles of latency are
the plain order statistics of the measured request times (common practice).
"""

from __future__ import annotations

import argparse
import tempfile
import threading
import time
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import requests
from sqlalchemy import create_engine, func, select
from sqlalchemy.orm import Session

from service.local_stack import RedisServer
from service.store import migrate
from service.store.models import TERMINAL_STATES, Chain, ChainArray, Job
from tests.harness.live_service import LiveService, start_live_service
from tests.load.slow_clients import HealthFigures, hold_and_probe

# Limits meant for tenants on a shared service, lifted so the load itself is what is measured.
LOAD_ENV = {
    "DRAWYARD_RATE_LIMIT": "0",
    "DRAWYARD_MAX_ACTIVE_JOBS": "0",
    "DRAWYARD_PROGRESS_INTERVAL": "0.5",
}


def tiny_job(seed: int, draws: int = 20) -> dict:
    """One chain of a one-unknown normal model (tests/service/bodies.py), a few iterations."""
    from tests.service.bodies import normal_mean

    return normal_mean(chains=1, warmup=20, draws=draws, seed=seed)


@dataclass
class ReadFigures:
    clients: int
    seconds: float
    latencies: list[float] = field(default_factory=list)
    errors: list[str] = field(default_factory=list)

    def line(self) -> str:
        times = np.asarray(self.latencies) * 1000
        p50, p99 = (np.percentile(times, [50, 99]) if times.size else (float("nan"),) * 2)
        return (
            f"readers: {self.clients} clients for {self.seconds:.0f} s: {times.size} requests "
            f"({times.size / self.seconds:.0f}/s), {len(self.errors)} errors, "
            f"p50 {p50:.1f} ms, p99 {p99:.1f} ms, max {times.max() if times.size else 0:.1f} ms"
        )


def read_load(base_url: str, running: list[str], done: list[str], clients: int,
              seconds: float) -> ReadFigures:
    """``clients`` threads alternate a running job's status and a finished job's summary."""
    figures = ReadFigures(clients, seconds)
    lock = threading.Lock()
    stop_at = time.monotonic() + seconds

    def client(index: int) -> None:
        session = requests.Session()
        urls = [f"{base_url}/v1/jobs/{running[index % len(running)]}",
                f"{base_url}/v1/jobs/{done[index % len(done)]}/summary"]
        mine: list[float] = []
        errors: list[str] = []
        turn = 0
        while time.monotonic() < stop_at:
            url = urls[turn % 2]
            turn += 1
            started = time.perf_counter()
            try:
                response = session.get(url, timeout=30)
                if response.status_code != 200:
                    errors.append(f"{url}: {response.status_code}")
            except requests.RequestException as error:
                errors.append(f"{url}: {error}")
            mine.append(time.perf_counter() - started)
        with lock:
            figures.latencies.extend(mine)
            figures.errors.extend(errors)

    threads = [threading.Thread(target=client, args=(i,)) for i in range(clients)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    return figures


@dataclass
class BurstFigures:
    submitted: int
    accepted: int
    stored_jobs: int
    succeeded: int
    draws_arrays: int
    chain_runs: int
    seconds: float
    refusals: list[str]

    def line(self) -> str:
        return (
            f"burst: {self.submitted} jobs submitted, {self.accepted} accepted; store holds "
            f"{self.stored_jobs} jobs, {self.succeeded} succeeded, {self.draws_arrays} draws "
            f"arrays, {self.chain_runs} chain attempts; all ended after {self.seconds:.0f} s"
        )

    @property
    def exact(self) -> bool:
        n = self.submitted
        return (self.accepted == self.stored_jobs == self.succeeded == self.draws_arrays
                == self.chain_runs == n and not self.refusals)


def burst(base_url: str, database_url: str, jobs: int, timeout: float) -> BurstFigures:
    """Submit ``jobs`` tiny jobs at once (50 at a time in flight), then count them in the store."""
    started = time.monotonic()

    def post(seed: int) -> tuple[str | None, str | None]:
        response = requests.post(f"{base_url}/v1/jobs", json=tiny_job(seed), timeout=60)
        if response.status_code == 202:
            return response.json()["id"], None
        return None, f"{response.status_code} {response.text}"

    with ThreadPoolExecutor(max_workers=50) as pool:
        outcomes = list(pool.map(post, range(1, jobs + 1)))
    refusals = [refusal for _, refusal in outcomes if refusal is not None]
    ids = sorted({job_id for job_id, _ in outcomes if job_id is not None})
    ours = Job.id.in_(ids)
    engine = create_engine(database_url)
    try:
        deadline = time.monotonic() + timeout
        while True:
            with Session(engine) as session:
                open_jobs = session.scalar(
                    select(func.count())
                    .select_from(Job)
                    .where(ours, Job.state.not_in(TERMINAL_STATES))
                )
            if open_jobs == 0 or time.monotonic() > deadline:
                break
            time.sleep(1.0)
        chains = select(Chain.id).where(Chain.job_id.in_(ids))
        with Session(engine) as session:
            stored = session.scalar(select(func.count()).select_from(Job).where(ours))
            succeeded = session.scalar(
                select(func.count()).select_from(Job).where(ours, Job.state == "succeeded")
            )
            arrays = session.scalar(
                select(func.count())
                .select_from(ChainArray)
                .where(ChainArray.kind == "draws", ChainArray.chain_id.in_(chains))
            )
            runs = session.scalar(select(func.sum(Chain.attempts)).where(Chain.job_id.in_(ids)))
    finally:
        engine.dispose()
    # Distinct ids from the 202 answers: a duplicate id would make `accepted` smaller than jobs.
    return BurstFigures(jobs, len(ids), int(stored), int(succeeded), int(arrays),
                        int(runs or 0), time.monotonic() - started, refusals[:5])


def run(
    clients: int = 200,
    seconds: float = 60.0,
    jobs: int = 500,
    workers: int = 2,
    burst_timeout: float = 900.0,
    folder: Path | None = None,
    slow_clients: int = 50,
) -> tuple[ReadFigures, BurstFigures, tuple[HealthFigures, HealthFigures]]:
    """Start a private stack, run both phases, stop everything; returns the figures."""
    folder = folder or Path(tempfile.mkdtemp(prefix="drawyard-soak-"))
    redis = RedisServer(folder / "redis").start()
    database_url = f"sqlite:///{(folder / 'soak.sqlite').resolve()}"
    migrate(database_url)
    service: LiveService = start_live_service(database_url, redis.url, workers, LOAD_ENV,
                                              folder / "logs")
    try:
        base = service.base_url
        done = [_submit(base, tiny_job(10_000 + i)) for i in range(4)]
        _wait_all(base, done, 300)
        running = [_submit(base, tiny_job(20_000 + i, draws=90_000)) for i in range(4)]
        port = int(base.rsplit(":", 1)[1])
        # The slow clients alone first, then beside the readers.
        alone = hold_and_probe("127.0.0.1", port, base, slow_clients, min(seconds, 15.0))
        probe = ThreadPoolExecutor(1).submit(
            hold_and_probe, "127.0.0.1", port, base, slow_clients, seconds
        )
        reads = read_load(base, running, done, clients, seconds)
        health = probe.result()
        for job_id in running:
            requests.post(f"{base}/v1/jobs/{job_id}/cancel", timeout=30)
        _wait_all(base, running, 120)
        figures = burst(base, database_url, jobs, burst_timeout)
    finally:
        service.stop()
        redis.stop()
    return reads, figures, (alone, health)


def _submit(base: str, body: dict) -> str:
    response = requests.post(f"{base}/v1/jobs", json=body, timeout=60)
    response.raise_for_status()
    return response.json()["id"]


def _wait_all(base: str, job_ids: list[str], timeout: float) -> None:
    deadline = time.monotonic() + timeout
    for job_id in job_ids:
        while requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()["state"] not in (
            *TERMINAL_STATES, "timed_out"
        ):
            if time.monotonic() > deadline:
                raise TimeoutError(f"job {job_id} did not end within {timeout} s")
            time.sleep(0.5)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="drawyard load run on loopback")
    parser.add_argument("--clients", type=int, default=200)
    parser.add_argument("--seconds", type=float, default=60.0)
    parser.add_argument("--jobs", type=int, default=500)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--slow-clients", type=int, default=50)
    args = parser.parse_args(argv)
    reads, figures, (alone, health) = run(args.clients, args.seconds, args.jobs, args.workers,
                                          slow_clients=args.slow_clients)
    print("alone:", alone.line(), flush=True)
    print(reads.line(), flush=True)
    for error in reads.errors[:5]:
        print("  read error:", error)
    print("beside the readers:", health.line(), flush=True)
    for error in [*alone.errors, *health.errors][:5]:
        print("  health error:", error)
    print(figures.line(), flush=True)
    for refusal in figures.refusals:
        print("  refused:", refusal)
    ok = not reads.errors and not alone.errors and not health.errors and figures.exact
    print("load run:", "PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
