"""Putting work on the queue: chain tasks by name, so the API needs no task code imported.

Each task carries, as a JSON keyword argument, the id of the request that caused it (none when
the sweeper sends it again), so the worker's log lines about it name that request too.
"""

from __future__ import annotations

from typing import Any

from celery import Celery

from service.structured_logs import current_request_id

RUN_CHAIN = "drawyard.run_chain"
FINISH_JOB = "drawyard.finish_job"


def send_chain_tasks(celery: Celery, queue: str, job_id: str, chain_count: int) -> None:
    """One task per chain, all at once, so the chains run on as many worker processes as exist."""
    with celery.producer_or_acquire() as producer:
        for index in range(chain_count):
            celery.send_task(
                RUN_CHAIN, args=[job_id, index], kwargs=_request_kwargs(), queue=queue,
                producer=producer, retry=True,
            )


def send_finish_task(celery: Celery, queue: str, job_id: str) -> None:
    celery.send_task(FINISH_JOB, args=[job_id], kwargs=_request_kwargs(), queue=queue, retry=True)


def _request_kwargs() -> dict[str, Any]:
    request_id = current_request_id()
    return {"request_id": request_id} if request_id else {}
