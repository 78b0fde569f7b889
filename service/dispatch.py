"""Putting work on the queue: chain tasks by name, so the API needs no task code imported."""

from __future__ import annotations

from celery import Celery

RUN_CHAIN = "drawyard.run_chain"
FINISH_JOB = "drawyard.finish_job"


def send_chain_tasks(celery: Celery, queue: str, job_id: str, chain_count: int) -> None:
    """One task per chain, all at once, so the chains run on as many worker processes as exist."""
    with celery.producer_or_acquire() as producer:
        for index in range(chain_count):
            celery.send_task(
                RUN_CHAIN, args=[job_id, index], queue=queue, producer=producer, retry=True
            )


def send_finish_task(celery: Celery, queue: str, job_id: str) -> None:
    celery.send_task(FINISH_JOB, args=[job_id], queue=queue, retry=True)
