"""The Celery application: JSON only, late acknowledgement, one message per worker process.

Workers run ``celery -A worker.celery_app:celery_app worker --prefetch-multiplier 1``.
The database is the source of truth for job and chain state; no result backend is used.
"""

from __future__ import annotations

import json
from pathlib import Path

from celery import Celery

from service.config import Settings, load_settings
from service.structured_logs import install_worker_logging


def broker_options(settings: Settings) -> tuple[str, dict]:
    """The broker URL and its transport options for ``settings``."""
    url, options = _derived_broker_options(settings)
    if settings.broker_library_options.strip():
        extra = json.loads(settings.broker_library_options)
        if not isinstance(extra, dict):
            raise ValueError("DRAWYARD_BROKER_LIBRARY_OPTIONS must be a JSON object")
        options.update(extra)
    return url, options


def _derived_broker_options(settings: Settings) -> tuple[str, dict]:
    if settings.broker_url.startswith("filesystem://"):
        folder = Path(settings.broker_folder).resolve()
        for sub in ("queue", "processed", "control"):
            (folder / sub).mkdir(parents=True, exist_ok=True)
        # One folder both ways: the API writes messages where the workers read them.
        return "filesystem://", {
            "data_folder_in": str(folder / "queue"),
            "data_folder_out": str(folder / "queue"),
            "processed_folder": str(folder / "processed"),
            "control_folder": str(folder / "control"),
            "store_processed": False,
        }
    # Redis redelivers a message not acknowledged within the visibility timeout; it is longer than
    # the longest allowed chain so a running chain is not handed to a second worker.
    return settings.broker_url, {"visibility_timeout": settings.effective_redelivery_timeout}


def make_celery(settings: Settings | None = None) -> Celery:
    settings = settings or load_settings()
    url, transport_options = broker_options(settings)
    app = Celery("drawyard", broker=url, set_as_current=False)
    app.conf.update(
        task_serializer="json",
        result_serializer="json",
        accept_content=["json"],
        event_serializer="json",
        task_ignore_result=True,
        result_backend=None,
        task_acks_late=True,
        task_reject_on_worker_lost=True,
        worker_prefetch_multiplier=1,
        broker_transport_options=transport_options,
        broker_connection_retry_on_startup=True,
        broker_connection_timeout=5,
        task_default_queue=settings.queue,
        task_create_missing_queues=True,
        # A hard stop a little after the chain's own time limit, should the engine never yield.
        task_time_limit=settings.chain_time_limit + 120,
        worker_hijack_root_logger=False,
        enable_utc=True,
        timezone="UTC",
    )
    app.conf.drawyard_settings = settings
    install_worker_logging(app, settings)
    app.autodiscover_tasks(["worker"], related_name="tasks", force=True)
    app.autodiscover_tasks(["worker"], related_name="callback_tasks", force=True)
    return app


celery_app = make_celery()
