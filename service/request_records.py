"""What each request leaves behind: its id, its counts and timing, its access line and events.

The request id is the caller's ``X-Request-Id`` when it is well formed (1 to 128 letters, digits
and ``-._:``; anything else could forge or break log lines), else a new random one. It is sent
back in the same header, put on every log line the request causes (service/structured_logs.py),
and carried to the workers in the tasks it queues (service/dispatch.py).

The access line is written here rather than by gunicorn, as JSON with the request id, the route
template, the status and the time taken. A refused submission (any 4xx answer to one) and every
429 are written as events too, with their problem type, and counted (service/metrics.py).
"""

from __future__ import annotations

import logging
import re
import time
import uuid

from flask import Flask, Response, g, request

from service.access.tenancy import current_identity
from service.metrics import HTTP_DURATION, HTTP_REQUESTS, JOBS_REFUSED
from service.problem_details import PROBLEM_TYPE
from service.structured_logs import request_id_var

REQUEST_ID_HEADER = "X-Request-Id"
WELL_FORMED_ID = re.compile(r"^[A-Za-z0-9._:-]{1,128}$")
# The endpoints a submission arrives at: the API's and the submit page's.
SUBMISSION_ENDPOINTS = frozenset({"jobs.create", "web.submit_form"})
# flask.g: when the request arrived.
STARTED = "drawyard_started"

access_log = logging.getLogger("drawyard.access")
event_log = logging.getLogger("drawyard.events")


def request_id_for(incoming: str | None) -> str:
    if incoming is not None and WELL_FORMED_ID.match(incoming):
        return incoming
    return uuid.uuid4().hex


def install_request_records(app: Flask) -> None:
    @app.before_request
    def _arrived() -> None:
        setattr(g, STARTED, time.perf_counter())
        request_id_var.set(request_id_for(request.headers.get(REQUEST_ID_HEADER)))

    @app.after_request
    def _answered(response: Response) -> Response:
        request_id = request_id_var.get()
        if request_id:
            response.headers[REQUEST_ID_HEADER] = request_id
        record(response)
        return response

    @app.teardown_request
    def _done(_error: BaseException | None) -> None:
        # A worker thread serves many requests: the next one must not inherit this id.
        request_id_var.set(None)


def record(response: Response) -> None:
    started = g.get(STARTED)
    seconds = time.perf_counter() - started if started is not None else 0.0
    route = request.url_rule.rule if request.url_rule is not None else "unmatched"
    status = response.status_code
    HTTP_REQUESTS.labels(route, request.method, str(status)).inc()
    HTTP_DURATION.labels(route, request.method).observe(seconds)
    identity = current_identity()
    problem = g.get(PROBLEM_TYPE)
    access_log.info(
        "%s %s %s", request.method, route, status,
        extra={"fields": {
            "event": "request", "method": request.method, "route": route, "path": request.path,
            "status": status, "seconds": round(seconds, 6), "problem": problem,
            "key_id": identity.key_id if identity else None,
        }},
    )
    submission = request.endpoint in SUBMISSION_ENDPOINTS
    if submission and 400 <= status < 500:
        JOBS_REFUSED.labels(problem or str(status)).inc()
        event_log.info("submission refused: %s (%s)", problem, status, extra={"fields": {
            "event": "submission_refused", "status": status, "problem": problem,
        }})
    elif status == 429:
        event_log.info("request refused: %s (429)", problem, extra={"fields": {
            "event": "too_many_requests", "status": status, "problem": problem, "route": route,
        }})
    if submission and status in (200, 202, 303) and request.method == "POST":
        job_id = response.headers.get("Location", "").rsplit("/", 1)[-1] or None
        event_log.info("submission accepted: job %s", job_id, extra={
            "job_id": job_id, "fields": {"event": "submission_accepted", "status": status},
        })
