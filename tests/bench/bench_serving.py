"""Request throughput of the buffering worker class against gunicorn's threaded one, side by side.

The same gunicorn configuration (service/gunicorn_conf.py: one process, four app threads), once
with our worker class (service/buffered_worker.py, which reads whole requests in an event loop)
and once with `-k gthread`, alternating; 50 client threads read `GET /v1/jobs` for 10 s each
time. The ratio says what the protection against slow clients costs in ordinary traffic.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import requests

from service.local_stack import RedisServer, free_port, service_env
from service.store import migrate

REPEATS = 4
CLIENTS = 50
SECONDS = 10.0


def requests_per_second(env: dict[str, str], extra: list[str]) -> float:
    port = free_port()
    server = subprocess.Popen(
        [sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_conf", *extra,
         "--bind", f"127.0.0.1:{port}", "--workers", "1", "--access-logfile", "/dev/null",
         "service.app:create_app()"],
        env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                if requests.get(base + "/v1/health/live", timeout=1).ok:
                    break
            except requests.RequestException:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError("the API did not start")
            time.sleep(0.1)
        counts = [0] * CLIENTS
        stop_at = time.monotonic() + SECONDS

        def client(index: int) -> None:
            session = requests.Session()
            while time.monotonic() < stop_at:
                session.get(base + "/v1/jobs", timeout=30)
                counts[index] += 1

        threads = [threading.Thread(target=client, args=(i,)) for i in range(CLIENTS)]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        return sum(counts) / SECONDS
    finally:
        server.terminate()
        server.wait(timeout=30)


def main() -> None:
    folder = Path(tempfile.mkdtemp(prefix="drawyard-bench-serving-"))
    redis = RedisServer(folder / "redis").start()
    store = f"sqlite:///{(folder / 'store.sqlite').resolve()}"
    migrate(store)
    env = {**os.environ, **service_env(store, redis.url, {"DRAWYARD_RATE_LIMIT": "0"})}
    ratios = []
    try:
        print(f"GET /v1/jobs, {CLIENTS} clients, {SECONDS:.0f} s each, alternating")
        for repeat in range(REPEATS):
            buffered = requests_per_second(env, [])
            threaded = requests_per_second(env, ["-k", "gthread"])
            ratios.append(buffered / threaded)
            print(f"  run {repeat + 1}: buffering worker {buffered:6.0f}/s   gthread "
                  f"{threaded:6.0f}/s   ratio {buffered / threaded:5.2f}", flush=True)
        print(f"median ratio (buffering / gthread): {statistics.median(ratios):.2f}")
    finally:
        redis.stop()


if __name__ == "__main__":
    main()
