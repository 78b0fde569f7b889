"""The real API (gunicorn) and N real Celery worker processes for a given database and broker."""

from __future__ import annotations

import tempfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

from service.local_stack import (
    READY_PATH,
    ChildProcess,
    api_ready,
    free_port,
    metrics_env,
    service_env,
    start_api,
    start_closing_worker,
    start_sweeper,
    start_worker,
    wait_until,
)


@dataclass
class LiveService:
    """What a test gets back: the base URL and handles to every process (to SIGKILL a worker)."""

    base_url: str
    api: ChildProcess
    workers: list[ChildProcess]
    env: dict[str, str]
    log_dir: Path
    database_url: str
    broker_url: str
    # The sweeper process (service/sweeper.py); None only while starting.
    sweeper: ChildProcess | None = None
    # The worker of the closing queue (finishing steps, callbacks); None only while starting.
    closing_worker: ChildProcess | None = None
    _next_index: int = field(default=0, repr=False)

    def add_workers(self, count: int = 1, timeout: float = 60.0) -> list[ChildProcess]:
        """Start more workers at once (e.g. to take over after one was killed); wait for all."""
        added = self._launch_workers(count)
        self._wait_consuming(added, timeout)
        return added

    def _launch_workers(self, count: int) -> list[ChildProcess]:
        added = []
        for _ in range(count):
            index = self._next_index
            self._next_index += 1
            added.append(start_worker(index, self.env, self.log_dir / f"worker{index}.log"))
        self.workers.extend(added)
        return added

    def _wait_consuming(self, workers: list[ChildProcess], timeout: float) -> None:
        for worker in workers:
            wait_until(lambda w=worker: _worker_log_says_ready(w), workers, timeout, worker.name)

    def add_worker(self, timeout: float = 60.0) -> ChildProcess:
        return self.add_workers(1, timeout)[0]

    def kill_worker(self, index: int) -> None:
        """SIGKILL a worker's whole process group: the main process and its pool process."""
        self.workers[index].kill()

    def logs(self) -> str:
        """Every process's log tail, for assertion messages."""
        return "\n".join(
            f"--- {child.name} ({child.log_path}):\n{child.log_tail(60)}"
            for child in [self.api, *self.workers,
                          *[c for c in (self.closing_worker, self.sweeper) if c is not None]]
        )

    def stop(self) -> None:
        for worker in self.workers:
            worker.signal_leader(worker.stop_signal)
        for worker in self.workers:
            worker.stop()
        if self.closing_worker is not None:
            self.closing_worker.stop()
        if self.sweeper is not None:
            self.sweeper.stop()
        self.api.stop()


def _worker_log_says_ready(worker: ChildProcess) -> bool:
    # Celery logs "<name> ready." once it consumes from its queues; with mingle and gossip off
    # there is no broadcast to ask instead.
    try:
        return " ready." in worker.log_path.read_text(errors="replace")
    except OSError:
        return False


def start_live_service(
    database_url: str,
    broker_url: str,
    workers: int = 1,
    env: Mapping[str, str] | None = None,
    log_dir: Path | None = None,
    timeout: float = 90.0,
) -> LiveService:
    """Start gunicorn and the workers, and wait until the API is ready and each worker consumes."""
    log_dir = log_dir or Path(tempfile.mkdtemp(prefix="drawyard-live-"))
    full_env = service_env(
        database_url, broker_url, {**metrics_env(log_dir / "metrics"), **(env or {})}
    )
    port = free_port()
    api = start_api(port, full_env, log_dir / "api.log")
    service = LiveService(
        f"http://127.0.0.1:{port}", api, [], full_env, log_dir, database_url, broker_url
    )
    try:
        # Everything boots side by side; then the API must answer and every worker consume.
        launched = service._launch_workers(workers)
        service.closing_worker = start_closing_worker(full_env, log_dir / "closing.log")
        service.sweeper = start_sweeper(full_env, log_dir / "sweeper.log")
        what = f"{service.base_url}{READY_PATH}"
        wait_until(api_ready(service.base_url), [api, *launched], timeout, what)
        service._wait_consuming([*launched, service.closing_worker], timeout)
    except BaseException:
        service.stop()
        raise
    return service
