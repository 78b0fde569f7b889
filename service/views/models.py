"""The model registry: register a spec under a name, list names and versions, read a version."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify, request

from service.http_caching import cached_json, next_link
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
from service.views.paging import requested_limit

models = Blueprint("models", __name__, url_prefix="/v1/models")


@models.get("")
def index() -> Response:
    rows, cursor = list_models(runtime(), requested_limit(), request.args.get("cursor"))
    response = jsonify({"models": [model_resource(row) for row in rows], "next_cursor": cursor})
    response.headers.update(next_link(request, cursor))
    return response


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
    rows, cursor = list_versions(runtime(), name, requested_limit(), request.args.get("cursor"))
    response = jsonify(
        {"name": name, "versions": [version_resource(row) for row in rows], "next_cursor": cursor}
    )
    response.headers.update(next_link(request, cursor))
    return response


@models.get("/<name>/versions/<int:version>")
def show(name: str, version: int) -> Response:
    # A registered version never changes.
    return cached_json(
        version_resource(get_version(runtime(), name, version), with_spec=True), final=True
    )
