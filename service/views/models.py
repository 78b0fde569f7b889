"""The model registry: register a spec under a name, list names and versions, read a version."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify, request

from service.job_queries import bad_parameter
from service.registry import (
    get_version,
    list_models,
    list_versions,
    model_resource,
    register,
    version_resource,
)
from service.views.context import runtime
from service.views.jobs import _json_body

models = Blueprint("models", __name__, url_prefix="/v1/models")


def _limit() -> int:
    settings = runtime().settings
    raw = request.args.get("limit")
    try:
        limit = settings.page_limit if raw is None else int(raw)
    except ValueError as error:
        raise bad_parameter("limit", "The limit is a whole number.") from error
    if not 1 <= limit <= settings.max_page_limit:
        raise bad_parameter("limit", f"The limit is between 1 and {settings.max_page_limit}.")
    return limit


@models.get("")
def index() -> Response:
    rows, cursor = list_models(runtime(), _limit(), request.args.get("cursor"))
    return jsonify({"models": [model_resource(row) for row in rows], "next_cursor": cursor})


@models.post("/<name>/versions")
def create(name: str) -> Response:
    registered = register(runtime(), name, _json_body())
    row = registered.version
    response = jsonify(version_resource(row, with_spec=True))
    # 201 with Location for a new version (RFC 9110 section 15.3.2); 200 when the same content
    # was already registered, which names the version that holds it.
    response.status_code = 201 if registered.created else 200
    response.headers["Location"] = f"/v1/models/{row.name}/versions/{row.version}"
    return response


@models.get("/<name>/versions")
def versions(name: str) -> Response:
    rows, cursor = list_versions(runtime(), name, _limit(), request.args.get("cursor"))
    return jsonify(
        {"name": name, "versions": [version_resource(row) for row in rows], "next_cursor": cursor}
    )


@models.get("/<name>/versions/<int:version>")
def show(name: str, version: int) -> Response:
    return jsonify(version_resource(get_version(runtime(), name, version), with_spec=True))
