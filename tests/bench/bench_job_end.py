"""Delay from a job's last chain to the job's end, with the queue full of other jobs' chains.

One chain worker process is kept busy by a long job while a short one-chain job and six jobs of
several seconds each queue behind it. The figure is, for the short job, the time from its chain's
end to the job's end (the finishing step: summary, diagnostics, verdict), set beside the chain's
own run time. The finishing step runs on the closing queue's worker, so it should not wait for
the six chains queued after it (goal: under 1 s).

Real parts: a private redis-server, a SQLite store, gunicorn, the chain worker, the closing worker
and the sweeper, started by the test harness. `python -m tests.bench job_end`.
"""

from __future__ import annotations

import tempfile
import time
from datetime import datetime
from pathlib import Path

import requests

from service.local_stack import RedisServer
from service.store import migrate
from tests.harness.live_service import start_live_service
from tests.service.bodies import normal_mean

REPEATS = 3


def _submit(base: str, body: dict) -> str:
    response = requests.post(f"{base}/v1/jobs", json=body, timeout=60)
    response.raise_for_status()
    return response.json()["id"]


def _job(base: str, job_id: str) -> dict:
    return requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()


def _at(stamp: str) -> datetime:
    return datetime.fromisoformat(stamp.replace("Z", "+00:00"))


def one_run(base: str, seed: int) -> tuple[float, float]:
    blocker = _submit(base, normal_mean(chains=1, warmup=500, draws=60_000, seed=seed))
    while _job(base, blocker)["state"] != "running":
        time.sleep(0.05)
    short = _submit(base, normal_mean(chains=1, warmup=100, draws=200, seed=seed + 1))
    others = [_submit(base, normal_mean(chains=1, warmup=500, draws=20_000, seed=seed + 2 + i))
              for i in range(6)]
    while (job := _job(base, short))["state"] not in ("succeeded", "failed"):
        time.sleep(0.05)
    for job_id in [blocker, *others]:
        requests.post(f"{base}/v1/jobs/{job_id}/cancel", timeout=30)
    for job_id in [blocker, *others]:
        while _job(base, job_id)["state"] in ("queued", "running"):
            time.sleep(0.2)
    chain = job["chains"][0]
    delay = (_at(job["finished_at"]) - _at(chain["finished_at"])).total_seconds()
    ran = (_at(chain["finished_at"]) - _at(chain["started_at"])).total_seconds()
    return delay, ran


def main() -> None:
    folder = Path(tempfile.mkdtemp(prefix="drawyard-bench-end-"))
    redis = RedisServer(folder / "redis").start()
    store = f"sqlite:///{(folder / 'store.sqlite').resolve()}"
    migrate(store)
    service = start_live_service(store, redis.url, 1, {"DRAWYARD_RATE_LIMIT": "0",
                                                       "DRAWYARD_MAX_ACTIVE_JOBS": "0"},
                                 folder / "logs")
    try:
        print("last chain -> job end, with six other jobs' chains queued behind (goal < 1 s)")
        for repeat in range(REPEATS):
            delay, ran = one_run(service.base_url, 100 * repeat)
            print(f"  run {repeat + 1}: delay {delay:6.3f} s; the chain itself ran {ran:6.3f} s; "
                  f"ratio {delay / ran:6.3f}", flush=True)
    finally:
        service.stop()
        redis.stop()


if __name__ == "__main__":
    main()
