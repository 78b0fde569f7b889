"""RFC 9457 problem documents: the one shape every error answer of the API takes."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from flask import Response, g, has_request_context, json

from worker.problems import Problem

MEDIA_TYPE = "application/problem+json"
TYPE_PREFIX = "urn:drawyard:problem:"
# flask.g: the problem type of this request's answer, for its metrics and log lines.
PROBLEM_TYPE = "drawyard_problem"


def note_problem(slug: str) -> None:
    if has_request_context():
        setattr(g, PROBLEM_TYPE, slug)


class ApiProblem(Exception):
    """Raised by views and the functions they call; the app turns it into a problem document."""

    def __init__(
        self,
        status: int,
        slug: str,
        title: str,
        detail: str,
        errors: Iterable[Problem | dict[str, str]] = (),
        headers: dict[str, str] | None = None,
    ):
        super().__init__(detail)
        self.status = status
        self.slug = slug
        self.title = title
        self.detail = detail
        self.errors = [e.as_dict() if isinstance(e, Problem) else dict(e) for e in errors]
        self.headers = headers or {}

    def document(self, instance: str | None = None) -> dict[str, Any]:
        body: dict[str, Any] = {
            "type": TYPE_PREFIX + self.slug,
            "title": self.title,
            "status": self.status,
            "detail": self.detail,
        }
        if instance:
            body["instance"] = instance
        if self.errors:
            body["errors"] = self.errors
        return body


def problem_response(problem: ApiProblem, instance: str | None = None) -> Response:
    note_problem(problem.slug)
    response = Response(json.dumps(problem.document(instance)), status=problem.status)
    response.mimetype = MEDIA_TYPE
    for name, value in problem.headers.items():
        response.headers[name] = value
    return response


def http_problem(status: int, title: str, detail: str) -> ApiProblem:
    """A problem for a plain HTTP error (unknown path, wrong method, body too large...)."""
    return ApiProblem(status, title.lower().replace(" ", "-"), title, detail)
