"""Service benchmark: what the queue, the store and HTTP add to sampling, and how workers scale.

1. Overhead: end-to-end wall time of a job through the live service (submit -> summary and draws
   read back over HTTP) over the in-process time of `worker.runner.run_in_process` for the same
   body (in a fresh Python with the workers' environment), for a small and a medium model,
   measured alternately in one run, median of REPEATS. Every body says `"reuse": false`, so each
   repeat really runs (a repeated seeded body would otherwise be answered from the store). Beside
   the wall times: the CPU time the worker's processes (its whole process group) spent on the job,
   and the in-process run's own CPU time, whose ratio is free of other processes' load. One worker
   process runs the chains one after another, as the in-process runner does. Target: <= 1.15 for
   the medium.
2. Throughput: the time for one worker process, and for two, to work through the same queue of 50
   small one-chain jobs, the two set-ups interleaved (1, 2, 1, 2, ...) over THROUGHPUT_ROUNDS
   rounds. Target: time(1 worker) / time(2 workers) >= 1.8 on two cores. Beside it, the workers'
   CPU time per chain: if it is the same with two workers as with one while the wall ratio is near
   2, both cores were free; a wall ratio alone does not show that.

Real parts throughout: a private redis-server, a SQLite store, gunicorn and Celery workers, started
by the test harness. Run with `make bench` (or `python -m tests.bench service`).
"""

from __future__ import annotations

import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
import uuid
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import requests

from service.local_stack import RedisServer, single_threaded_numerics
from tests.harness.live_service import LiveService, start_live_service

REPEATS = 5
THROUGHPUT_JOBS = 50
THROUGHPUT_ROUNDS = 2
MIN_POLL, MAX_POLL = 0.02, 0.25
TERMINAL = {"succeeded", "failed", "cancelled"}


def small_job(seed: int = 1, chains: int = 2) -> dict[str, Any]:
    """Normal data with unknown mean and scale: two unknowns, 40 observations."""
    rng = np.random.default_rng(11)
    return {
        "model": {
            "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
            "unknowns": {"mu": {}, "sigma": {"lower": 0}},
            "priors": [
                {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 10}},
                {"on": "sigma", "distribution": "half_normal", "arguments": {"scale": 5}},
            ],
            "likelihood": [
                {"name": "y_obs", "observed": "y", "distribution": "normal",
                 "arguments": {"location": "mu", "scale": "sigma"}},
            ],
        },
        "data": {"n": 40, "y": rng.normal(3.0, 2.0, size=40).round(4).tolist()},
        "sampler": {"chains": chains, "seed": seed, "warmup_iterations": 300, "draws": 300},
        "labels": {"bench": "small"},
        "reuse": False,
    }


def medium_job(seed: int = 2) -> dict[str, Any]:
    """A partially pooled Poisson regression: 30 groups x 40 rows, 33 unknowns."""
    rng = np.random.default_rng(12)
    groups, per_group = 30, 40
    group = np.repeat(np.arange(1, groups + 1), per_group)
    x = rng.normal(size=group.size)
    log_rate = 2.0 + 0.4 * rng.normal(size=groups)[group - 1] + 0.3 * x
    return {
        "model": {
            "inputs": {
                "groups": {"type": "integer", "lower": 1},
                "rows": {"type": "integer"},
                "group": {"type": "integer", "shape": ["rows"], "lower": 1, "upper": "groups"},
                "x": {"type": "real", "shape": ["rows"]},
                "count": {"type": "integer", "shape": ["rows"], "lower": 0},
            },
            "unknowns": {
                "intercept": {}, "slope": {}, "spread": {"lower": 0},
                "offset": {"shape": ["groups"]},
            },
            "derived": {"group_level": "intercept + spread * offset"},
            "priors": [
                {"on": "intercept", "distribution": "normal",
                 "arguments": {"location": 0, "scale": 5}},
                {"on": "slope", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
                {"on": "spread", "distribution": "half_normal", "arguments": {"scale": 1}},
                {"on": "offset", "distribution": "normal",
                 "arguments": {"location": 0, "scale": 1}},
            ],
            "likelihood": [
                {"name": "counts", "observed": "count", "distribution": "poisson",
                 "arguments": {"log_rate": "group_level[group] + slope * x"}},
            ],
        },
        "data": {
            "groups": groups, "rows": int(group.size), "group": group.tolist(),
            "x": x.round(4).tolist(), "count": rng.poisson(np.exp(log_rate)).tolist(),
        },
        "sampler": {"chains": 2, "seed": seed, "warmup_iterations": 500, "draws": 500},
        "labels": {"bench": "medium"},
        "reuse": False,
    }


def submit(base_url: str, body: dict[str, Any]) -> str:
    response = requests.post(f"{base_url}/v1/jobs", json=body, timeout=60)
    if response.status_code != 202:
        raise RuntimeError(f"submission refused ({response.status_code}): {response.text}")
    return requests.compat.urljoin(base_url, response.headers["Location"])


def wait_done(job_url: str, poll: float | None = None, timeout: float = 1800) -> dict[str, Any]:
    """Poll until the job ends. By default the interval is 1% of the time waited so far (20 ms to
    0.25 s): fine enough to time short jobs, and sparse enough on long ones that the polling does
    not take CPU from the worker it is timing."""
    started = time.monotonic()
    while True:
        job = requests.get(job_url, timeout=60).json()
        if job["state"] in TERMINAL:
            if job["state"] != "succeeded":
                raise RuntimeError(f"{job_url} ended {job['state']}: {job.get('error')}")
            return job
        waited = time.monotonic() - started
        if waited > timeout:
            raise RuntimeError(f"{job_url} not finished after {timeout} s")
        time.sleep(poll if poll is not None else min(max(0.01 * waited, MIN_POLL), MAX_POLL))


_TICK = os.sysconf("SC_CLK_TCK")


def group_cpu_seconds(groups: set[int]) -> float:
    """User plus system CPU time of every live process in the given process groups (a worker's
    main process and its pool processes share one), read from /proc/<pid>/stat (proc(5))."""
    total = 0
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue  # ended meanwhile
        # after the command: state ppid pgrp session tty tpgid flags minflt cminflt majflt
        # cmajflt utime stime
        if int(fields[2]) in groups:
            total += int(fields[11]) + int(fields[12])
    return total / _TICK


def worker_groups(service: LiveService) -> set[int]:
    return {worker.pid for worker in service.workers}


def end_to_end_seconds(service: LiveService, body: dict[str, Any]) -> tuple[float, float]:
    """Submit, wait, then read the summary and every draw back: the client's whole round trip.

    Returns its wall time and the CPU time the workers' processes spent meanwhile."""
    groups = worker_groups(service)
    cpu_before = group_cpu_seconds(groups)
    started = time.perf_counter()
    job_url = submit(service.base_url, body)
    wait_done(job_url)
    requests.get(f"{job_url}/summary", timeout=60).raise_for_status()
    with requests.get(f"{job_url}/draws", timeout=300, stream=True) as draws:
        draws.raise_for_status()
        for _ in draws.iter_content(chunk_size=1 << 16):
            pass
    return time.perf_counter() - started, group_cpu_seconds(groups) - cpu_before


IN_PROCESS = """
import json, sys, time
from worker.runner import run_in_process
warm_up, body = (json.load(open(path)) for path in sys.argv[1:3])
run_in_process(warm_up)
started, cpu = time.perf_counter(), time.process_time()
run_in_process(body)
print(time.perf_counter() - started, time.process_time() - cpu)
"""


def in_process_seconds(body: dict[str, Any], env: dict[str, str],
                       workdir: Path) -> tuple[float, float]:
    """run_in_process timed inside a fresh Python with the workers' environment (so the same
    BLAS threading), after an untimed small job, as the service's worker has run one too.
    Returns its wall time and its CPU time."""
    warm_up, path = workdir / "in_process_warm_up.json", workdir / "in_process_body.json"
    warm_up.write_text(json.dumps(small_job(seed=99)))
    path.write_text(json.dumps(body))
    done = subprocess.run(
        [sys.executable, "-c", IN_PROCESS, str(warm_up), str(path)],
        env={**os.environ, **env}, capture_output=True, text=True, check=True, timeout=1800,
    )
    wall, cpu = done.stdout.strip().splitlines()[-1].split()
    return float(wall), float(cpu)


def fresh_store(path: Path) -> str:
    from service.store import migrate

    url = f"sqlite:///{path}"
    migrate(url)
    return url


def measure_overhead(redis: RedisServer, workdir: Path) -> list[tuple[str, tuple, tuple]]:
    redis.flush()
    service = start_live_service(
        fresh_store(workdir / "overhead.sqlite"), redis.url, workers=1,
        log_dir=workdir / "overhead-logs",
    )
    worker_env = single_threaded_numerics(service.env)
    rows = []
    try:
        # The first job pays for imports in the worker's pool process; it is not counted.
        end_to_end_seconds(service, small_job(seed=99))
        for name, make in (("small", small_job), ("medium", medium_job)):
            body = make()
            served, local = [], []
            for _ in range(REPEATS):
                # Alternating keeps slow drifts of the machine out of the ratio.
                local.append(in_process_seconds(body, worker_env, workdir))
                served.append(end_to_end_seconds(service, body))
            rows.append((name, tuple(statistics.median(x) for x in zip(*served, strict=True)),
                         tuple(statistics.median(x) for x in zip(*local, strict=True))))
    finally:
        service.stop()
    return rows


def parse_time(text: str) -> float:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()


def throughput_seconds(redis: RedisServer, workdir: Path,
                       workers: int) -> tuple[float, float, float]:
    """Time for N workers to drain a queue of THROUGHPUT_JOBS jobs: from the first chain's start
    to the last job's finish, both as recorded by the service.

    The jobs are all submitted before any worker starts, so the API's checking of submissions
    does not compete with the workers for the cores, and worker start-up is not counted.
    Returns that time, the median time of one chain, start to finish, as the store saw it, and
    the workers' processes' CPU time per job over the whole drain.
    """
    redis.flush()
    tag = uuid.uuid4().hex[:8]
    service = start_live_service(
        fresh_store(workdir / f"throughput{workers}-{tag}.sqlite"), redis.url, workers=0,
        log_dir=workdir / f"throughput{workers}-logs",
    )
    try:
        urls = [submit(service.base_url, small_job(seed=1000 + i, chains=1))
                for i in range(THROUGHPUT_JOBS)]
        added = service.add_workers(workers)
        groups = {worker.pid for worker in added}
        cpu_before = group_cpu_seconds(groups)
        # Watch only the last job closely; the others are read once it is done.
        wait_done(urls[-1], poll=0.25)
        jobs = [wait_done(url, poll=0.25) for url in urls]
        cpu_per_job = (group_cpu_seconds(groups) - cpu_before) / THROUGHPUT_JOBS
        chains = [c for job in jobs for c in job["chains"]]
        first_start = min(parse_time(c["started_at"]) for c in chains)
        chain_seconds = statistics.median(
            parse_time(c["finished_at"]) - parse_time(c["started_at"]) for c in chains
        )
        drained = max(parse_time(job["finished_at"]) for job in jobs) - first_start
        return drained, chain_seconds, cpu_per_job
    finally:
        service.stop()


def load_note() -> str:
    # Other processes on the machine take cores from the workers and skew the throughput ratio.
    one, five, _ = os.getloadavg()
    return f"load average {one:.2f} (1 min), {five:.2f} (5 min) on {os.cpu_count()} CPUs"


def main() -> None:
    workdir = Path(tempfile.mkdtemp(prefix="drawyard-bench-"))
    redis = RedisServer(workdir / "redis").start()
    print(f"before: {load_note()}")
    try:
        print("service overhead = end-to-end / in-process, same job (\"reuse\": false), "
              f"median of {REPEATS} interleaved (target <= 1.15 for medium); CPU = the worker's "
              "processes for the job / the in-process run's own", flush=True)
        for name, (served, served_cpu), (local, local_cpu) in measure_overhead(redis, workdir):
            print(f"  {name:6s}  wall {served:7.2f} s / {local:7.2f} s = {served / local:5.3f}   "
                  f"CPU {served_cpu:7.2f} s / {local_cpu:7.2f} s = {served_cpu / local_cpu:5.3f}",
                  flush=True)
        runs: dict[int, list[tuple[float, float, float]]] = {1: [], 2: []}
        for _ in range(THROUGHPUT_ROUNDS):
            for workers in (1, 2):  # interleaved, so drifts of the machine's load hit both
                runs[workers].append(throughput_seconds(redis, workdir, workers))
                print(f"  ({workers} worker{'s' if workers > 1 else ''}: "
                      f"{runs[workers][-1][0]:.2f} s, {load_note()})", flush=True)
        (one, chain_one, cpu_one), (two, chain_two, cpu_two) = (
            tuple(statistics.median(x) for x in zip(*runs[w], strict=True)) for w in (1, 2))
        print(f"throughput: draining a queue of {THROUGHPUT_JOBS} small one-chain jobs, median of "
              f"{THROUGHPUT_ROUNDS} interleaved rounds (target ratio >= 1.8)")
        print(f"  1 worker {one:7.2f} s ({THROUGHPUT_JOBS / one:5.2f} jobs/s)   "
              f"2 workers {two:7.2f} s ({THROUGHPUT_JOBS / two:5.2f} jobs/s)   "
              f"ratio {one / two:5.3f}", flush=True)
        # If the chains themselves run slower side by side, the cores were not free for both.
        print(f"  median chain run time: {chain_one:.3f} s with 1 worker, {chain_two:.3f} s with 2 "
              f"(ratio {chain_two / chain_one:4.2f}; 1.00 when both cores are free)", flush=True)
        print(f"  workers' CPU time per chain: {cpu_one:.3f} s with 1 worker, {cpu_two:.3f} s "
              f"with 2 (ratio {cpu_two / cpu_one:4.2f})", flush=True)
        print(f"after: {load_note()}")
    finally:
        redis.stop()
    shutil.rmtree(workdir, ignore_errors=True)


if __name__ == "__main__":
    main()
