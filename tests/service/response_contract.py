"""Every answer the service tests receive is checked against the JSON Schema the API publishes.

The schema for a (method, route, status) comes from service.openapi.RESPONSES, the same table the
served OpenAPI document is built from, so a view that drifts from its documented shape fails here.
Validation follows JSON Schema 2020-12 (the jsonschema package's Draft202012Validator).
"""

from __future__ import annotations

import json
import re
from typing import Any

from service.openapi import RESPONSES
from service.schemas import validator

JSON_TYPES = ("application/json", "application/problem+json")


def _route(path: str) -> str:
    path = path.split("?", 1)[0]
    path = re.sub(r"^https?://[^/]+", "", path)
    path = re.sub(
        r"^/v1/models/[^/]+/versions/[^/]+$", "/v1/models/{name}/versions/{version}", path
    )
    path = re.sub(r"^/v1/models/[^/]+/versions$", "/v1/models/{name}/versions", path)
    return re.sub(r"^/v1/jobs/[^/]+", "/v1/jobs/{job_id}", path)


def check(method: str, path: str, status: int, content_type: str, body: bytes | str) -> Any:
    """The parsed JSON body after checking it against its schema (CSV bodies come back as text)."""
    route = _route(path)
    if route == "/v1/openapi.json":
        return json.loads(body)
    table = RESPONSES.get((method.lower(), route))
    assert table is not None, f"{method} {route} is not in the published API"
    assert status in table, f"{method} {route} answered {status}, not a documented status"
    stem = table[status]
    media = content_type.split(";")[0].strip()
    if media == "text/csv":
        assert stem in ("draws", "sampler_stats"), f"{route} answered CSV"
        return body.decode() if isinstance(body, bytes) else body
    expected = "application/problem+json" if stem == "problem" else "application/json"
    assert media == expected, f"{method} {route} {status}: content type {media}, not {expected}"
    document = json.loads(body)
    errors = sorted(validator(stem).iter_errors(document), key=lambda e: list(e.path))
    assert not errors, f"{method} {route} {status} breaks {stem}.json: " + "; ".join(
        f"{list(e.path)}: {e.message}" for e in errors[:5]
    )
    return document


def check_flask(method: str, path: str, response: Any) -> Any:
    return check(method, path, response.status_code, response.content_type, response.get_data())


def check_requests(response: Any) -> Any:
    return check(
        response.request.method,
        response.request.path_url,
        response.status_code,
        response.headers.get("Content-Type", ""),
        response.content,
    )
