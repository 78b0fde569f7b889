"""The Celery task delivering a job's completion callback, with bounded exponential backoff."""

from __future__ import annotations

from celery import Task, shared_task

from service.callbacks import DELIVER_CALLBACK, deliver

# The per-process runtime of the chain tasks: one database engine per pool process.
from worker.tasks import _runtime


@shared_task(bind=True, name=DELIVER_CALLBACK, acks_late=True, max_retries=None)
def deliver_callback(self: Task, job_id: str) -> str:
    # The attempt bound lives in the settings, checked by deliver(), not in Celery's max_retries,
    # so the event log and the retries agree on the count.
    outcome = deliver(_runtime(self), job_id, attempt=self.request.retries + 1)
    if outcome.retry_in is not None:
        # The retry goes back to the closing queue, never behind chains.
        raise self.retry(countdown=outcome.retry_in,
                         queue=self.app.conf.drawyard_settings.closing_queue)
    return "delivered" if outcome.delivered else "not delivered"
