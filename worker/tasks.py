"""Celery tasks: thin wrappers that pass ids to the service's chain and finishing steps."""

from __future__ import annotations

import os
import threading

from celery import Task, shared_task

# Imported here, in the worker's main process, so every forked pool process starts with the engine
# loaded instead of paying for the imports on its first chain.
import worker.runner  # noqa: F401
from service.chain_work import run_chain as run
from service.finishing import finish
from service.runtime import Runtime, build_runtime

_runtimes: dict[tuple[int, int], Runtime] = {}
# The closing worker runs a thread pool: its threads share one runtime, built once.
_runtimes_lock = threading.Lock()


def _runtime(task: Task) -> Runtime:
    # One database engine per pool process: connections must not cross a fork.
    key = (os.getpid(), id(task.app))
    with _runtimes_lock:
        if key not in _runtimes:
            _runtimes[key] = build_runtime(task.app.conf.drawyard_settings, task.app)
        return _runtimes[key]


@shared_task(
    bind=True,
    name="drawyard.run_chain",
    acks_late=True,
    reject_on_worker_lost=True,
    max_retries=None,
)
def run_chain(self: Task, job_id: str, chain_index: int, request_id: str | None = None) -> str:
    # request_id: only for the log lines (service/structured_logs.py sets it before the task runs).
    outcome = run(_runtime(self), job_id, int(chain_index), recheck=self.request.retries > 0)
    if outcome.recheck_after is not None:
        # Held by another delivery: look again when its lease would lapse (the holder may be dead).
        raise self.retry(countdown=outcome.recheck_after)
    return outcome.status


@shared_task(bind=True, name="drawyard.finish_job", acks_late=True, reject_on_worker_lost=True)
def finish_job(self: Task, job_id: str, request_id: str | None = None) -> str:
    return finish(_runtime(self), job_id)
