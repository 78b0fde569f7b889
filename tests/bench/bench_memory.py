"""Memory of a long chain (issue 18 item 7): peak RSS of the worker process that runs one
100,000-draw chain of a 100-unknown model, and of the process that finishes the job, each over
the size of the chain's draw matrix (100,000 x 100 float64 = 80 MB). Goal: the chain's peak at
most 2.5 times the matrix.

Real parts: a private redis-server, a SQLite store, gunicorn, one Celery chain worker and the
closing worker, started by the test harness; the job goes in over HTTP like any other. The peaks
are the kernel's high-water marks of resident memory (VmHWM in /proc/<pid>/status, proc(5)),
reset just before the job by writing 5 to /proc/<pid>/clear_refs, so they cover this job only;
"over idle" subtracts the process's resident memory just before (the interpreter, numpy, the
service's modules), which no draw matrix causes. The chain runs in the worker's pool process, the
finishing step in the closing worker (a thread pool). Run with
`.venv/bin/python -m tests.bench memory` (a few minutes: the chain is 100,300 NUTS iterations).
"""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from pathlib import Path
from typing import Any

import requests

from service.local_stack import RedisServer
from tests.bench.bench_service import fresh_store, load_note, submit, wait_done
from tests.harness.live_service import start_live_service
from tests.harness.processes import descendants_of

UNKNOWNS = 100
DRAWS = 100_000
WARMUP = 300
GOAL = 2.5


def long_chain_job(draws: int = DRAWS, method: str = "nuts") -> dict[str, Any]:
    """100 normal means with known variance, one observation each (a conjugate model whose only
    role here is its size): one chain of 100,000 draws of 100 quantities."""
    return {
        "model": {
            "inputs": {"y": {"type": "real", "shape": [UNKNOWNS]}},
            "unknowns": {"mu": {"shape": [UNKNOWNS]}},
            "priors": [
                {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 10}}
            ],
            "likelihood": [
                {"name": "obs", "observed": "y", "distribution": "normal",
                 "arguments": {"location": "mu", "scale": 1}}
            ],
        },
        "data": {"y": [round(0.01 * i, 2) for i in range(UNKNOWNS)]},
        "sampler": {"chains": 1, "seed": 18, "method": method, "warmup_iterations": WARMUP,
                    "draws": draws},
        "reuse": False,
    }  # fmt: skip


def status_kib(pid: int, field: str) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    raise LookupError(f"{field} not in /proc/{pid}/status")


def reset_peak(pid: int) -> int:
    """Reset the process's resident high-water mark to its current size; returns that (KiB)."""
    Path(f"/proc/{pid}/clear_refs").write_text("5")
    return status_kib(pid, "VmRSS")


def main() -> None:
    workdir = Path(tempfile.mkdtemp(prefix="drawyard-bench-memory-"))
    redis = RedisServer(workdir / "redis").start()
    service = start_live_service(
        fresh_store(workdir / "memory.sqlite"), redis.url, workers=1, log_dir=workdir / "logs",
        # the deployment's limit counts warm-up with the draws; 100,000 draws need more
        env={"DRAWYARD_MAX_DRAWS": str(DRAWS + WARMUP)},
    )
    matrix = DRAWS * UNKNOWNS * 8
    try:
        print(f"before: {load_note()}", flush=True)
        # A short job of the same model first: what the processes load on their first job
        # (modules imported lazily, the compiled model) is theirs, not the long chain's.
        wait_done(submit(service.base_url, long_chain_job(draws=200)), poll=0.5)
        (pool,) = descendants_of(service.workers[0].pid)  # --concurrency 1: one pool process
        closing = service.closing_worker.pid
        idle = {pid: reset_peak(pid) for pid in (pool, closing)}
        started = time.perf_counter()
        job_url = submit(service.base_url, long_chain_job())
        wait_done(job_url, poll=1.0, timeout=3600)
        requests.get(f"{job_url}/summary", timeout=60).raise_for_status()
        seconds = time.perf_counter() - started
        print(f"one chain of {DRAWS:,} draws x {UNKNOWNS} quantities (draw matrix "
              f"{matrix / 2**20:.1f} MiB), job {seconds:.0f} s; peak RSS (VmHWM) / draw matrix "
              f"(goal for the chain <= {GOAL})", flush=True)
        for name, pid in (("chain worker (pool process)", pool), ("finishing (closing worker)",
                                                                     closing)):
            peak = status_kib(pid, "VmHWM") * 1024
            over = peak - idle[pid] * 1024
            print(f"  {name:29s} peak {peak / 2**20:7.1f} MiB = {peak / matrix:5.2f} x; "
                  f"over idle ({idle[pid] / 1024:.0f} MiB) {over / 2**20:7.1f} MiB = "
                  f"{over / matrix:5.2f} x", flush=True)
        print(f"after: {load_note()}")
    finally:
        service.stop()
        redis.stop()
    shutil.rmtree(workdir, ignore_errors=True)


if __name__ == "__main__":
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    main()
