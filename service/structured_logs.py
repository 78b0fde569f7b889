"""Structured logs: one JSON object per line, carrying the request, job and chain a line is about.

The ids travel in context variables: a Flask request sets its request id
(service/request_records.py) and the job from its URL; a Celery task sets all three from its
arguments (tasks take ``job_id``, for chains the 0-based ``chain_index``, and a ``request_id``
keyword the API adds when it queues them). A filter copies them onto every record, so code that
logs needs no extra arguments. A line about an event adds its own members with
``extra={"fields": {...}}``. DRAWYARD_LOG_FORMAT picks "json" (the default) or "text".
"""

from __future__ import annotations

import contextvars
import json
import logging
import sys
from datetime import UTC, datetime
from typing import Any

from service.access.redaction import redact
from service.config import Settings

job_id_var: contextvars.ContextVar[str | None] = contextvars.ContextVar("job_id", default=None)
chain_var: contextvars.ContextVar[int | None] = contextvars.ContextVar("chain", default=None)
request_id_var: contextvars.ContextVar[str | None] = contextvars.ContextVar(
    "request_id", default=None
)

HANDLER_NAME = "drawyard-structured"
TEXT_FORMAT = (
    "%(asctime)s %(levelname)s %(name)s [request %(request_id)s job %(job_id)s chain %(chain)s] "
    "%(message)s"
)


class JobContextFilter(logging.Filter):
    """Puts the current request id, job id and chain number (1-based, as the API shows it) on
    each record."""

    def filter(self, record: logging.LogRecord) -> bool:
        if not hasattr(record, "request_id"):
            record.request_id = request_id_var.get()
        if not hasattr(record, "job_id"):
            record.job_id = job_id_var.get()
        if not hasattr(record, "chain"):
            record.chain = chain_var.get()
        return True


class JsonLineFormatter(logging.Formatter):
    """A record as one line of JSON: time (RFC 3339, UTC), level, logger, message, ids."""

    def format(self, record: logging.LogRecord) -> str:
        document: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname,
            "logger": record.name,
            "message": record.getMessage(),
            "request_id": getattr(record, "request_id", None),
            "job_id": getattr(record, "job_id", None),
            "chain": getattr(record, "chain", None),
            "process": record.process,
        }
        extra = getattr(record, "fields", None)
        if isinstance(extra, dict):
            document.update({k: v for k, v in extra.items() if k not in document})
        if record.exc_info:
            document["exception"] = self.formatException(record.exc_info)
        # default=str: a stray object in a message argument must not lose the line. Credentials
        # are blanked in the whole line, so a key sent where none belongs (a request id, a path)
        # is caught as well as one in the message.
        return redact(json.dumps(document, default=str))


def configure_logging(settings: Settings, level: int = logging.INFO) -> None:
    """One handler on the root logger (replaced, not added, when called again)."""
    root = logging.getLogger()
    for handler in [h for h in root.handlers if h.get_name() == HANDLER_NAME]:
        root.removeHandler(handler)
    handler = logging.StreamHandler(sys.stderr)
    handler.set_name(HANDLER_NAME)
    handler.addFilter(JobContextFilter())
    if settings.log_format == "text":
        handler.setFormatter(logging.Formatter(TEXT_FORMAT))
    else:
        handler.setFormatter(JsonLineFormatter())
    root.addHandler(handler)
    root.setLevel(level)
    # Python's warnings (a library's deprecation or security notice) become JSON lines as well.
    logging.captureWarnings(True)


def set_job_context(
    job_id: str | None, chain_index: int | None = None, request_id: str | None = None
) -> None:
    job_id_var.set(job_id)
    chain_var.set(None if chain_index is None else int(chain_index) + 1)
    request_id_var.set(request_id)


def current_request_id() -> str | None:
    return request_id_var.get()


def install_request_context(app: Any) -> None:
    """Flask: every request about a job (``/v1/jobs/<job_id>/...``) logs with its id."""
    from flask import request

    @app.before_request
    def _job_from_url() -> None:
        job_id_var.set((request.view_args or {}).get("job_id"))
        chain_var.set(None)


def install_worker_logging(celery: Any, settings: Settings) -> None:
    """Celery: our handler instead of Celery's, and each task's ids in the context."""
    from celery import signals

    def _setup(loglevel: Any = None, **_: Any) -> None:
        level = logging.getLevelName(loglevel) if isinstance(loglevel, str) else loglevel
        configure_logging(settings, level if isinstance(level, int) else logging.INFO)

    def _prerun(task: Any = None, args: Any = None, kwargs: Any = None, **_: Any) -> None:
        values = list(args or [])
        job_id = (kwargs or {}).get("job_id", values[0] if values else None)
        chain_index = (kwargs or {}).get("chain_index", values[1] if len(values) > 1 else None)
        set_job_context(job_id, chain_index, (kwargs or {}).get("request_id"))

    def _postrun(**_: Any) -> None:
        set_job_context(None)

    # weak=False: these closures have no other reference and would be collected at once.
    # celeryd_init comes first: Celery's start-up checks warn before it sets up logging.
    signals.celeryd_init.connect(_setup, weak=False)
    signals.setup_logging.connect(_setup, weak=False)
    signals.task_prerun.connect(_prerun, weak=False)
    signals.task_postrun.connect(_postrun, weak=False)
