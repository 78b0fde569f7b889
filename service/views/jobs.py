"""Jobs: submit, read, list, cancel."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, Response, jsonify, request
from werkzeug.exceptions import RequestEntityTooLarge

from service.http_caching import cached_json, next_link
from service.job_queries import JobFilter, bad_parameter, cancel_job, get_job, list_jobs
from service.job_resources import job_resource
from service.json_body import parse_json_body
from service.problem_details import ApiProblem
from service.store.models import TERMINAL_STATES
from service.submissions import submit
from service.views.context import runtime
from service.views.paging import requested_limit

jobs = Blueprint("jobs", __name__, url_prefix="/v1/jobs")


def _json_body() -> Any:
    if request.mimetype != "application/json":
        raise ApiProblem(
            415,
            "unsupported-media-type",
            "Unsupported media type",
            f"Send the submission as application/json, not {request.mimetype or 'nothing'}.",
            [{"pointer": "", "message": "The body must be sent as application/json."}],
        )
    return parse_json_body(_body_within_limit())


def _body_within_limit() -> bytes:
    """The body, refused with 413 once more bytes arrive than the limit, whatever the framing.

    A chunked body has no Content-Length for Flask to check up front, and reading it through a
    limited stream would silently cut it; so count what is actually read.
    """
    limit = runtime().settings.max_body_bytes
    data = request.stream.read(limit + 1)
    if len(data) > limit:
        raise RequestEntityTooLarge()
    return data


@jobs.post("")
def create() -> Response:
    key = request.headers.get("Idempotency-Key")
    if key is not None and not 1 <= len(key) <= 255:
        raise bad_parameter("Idempotency-Key", "The key must be 1 to 255 characters.")
    accepted = submit(runtime(), _json_body(), key)
    job, chains = get_job(runtime(), accepted.job.id)
    response = jsonify(job_resource(job, chains))
    response.status_code = 202 if accepted.created else 200
    response.headers["Location"] = f"/v1/jobs/{job.id}"
    if job.state in ("queued", "running"):
        response.headers["Retry-After"] = "2"
    return response


@jobs.get("")
def index() -> Response:
    limit = requested_limit()
    where = JobFilter.parse(
        request.args.getlist("state"), request.args.getlist("label"),
        request.args.getlist("verdict"),
    )
    page, cursor = list_jobs(runtime(), where, limit, request.args.get("cursor"))
    response = jsonify({"jobs": [job_resource(j, c) for j, c in page], "next_cursor": cursor})
    response.headers.update(next_link(request, cursor))
    return response


@jobs.get("/<job_id>")
def show(job_id: str) -> Response:
    job, chains = get_job(runtime(), job_id)
    response = cached_json(job_resource(job, chains), final=job.state in TERMINAL_STATES)
    if job.state in ("queued", "running"):
        response.headers["Retry-After"] = "2"
    return response


@jobs.post("/<job_id>/cancel")
def cancel(job_id: str) -> Response:
    job, chains = cancel_job(runtime(), job_id)
    return jsonify(job_resource(job, chains))
