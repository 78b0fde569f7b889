"""The model registry: register a spec under a name, list names and versions, read a version."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

from service.registry import (
    get_version,
    list_models,
    list_versions,
    register,
    version_resource,
)
from service.views.context import runtime
from service.views.jobs import _json_body

models = Blueprint("models", __name__, url_prefix="/v1/models")


@models.get("")
def index() -> Response:
    return jsonify({"models": list_models(runtime())})


@models.post("/<name>/versions")
def create(name: str) -> Response:
    registered = register(runtime(), name, _json_body())
    response = jsonify(version_resource(registered.version))
    response.status_code = 201 if registered.created else 200
    response.headers["Location"] = f"/v1/models/{name}/versions/{registered.version.version}"
    return response


@models.get("/<name>/versions")
def versions(name: str) -> Response:
    rows = list_versions(runtime(), name)
    return jsonify({"name": name, "versions": [version_resource(row) for row in rows]})


@models.get("/<name>/versions/<int:version>")
def show(name: str, version: int) -> Response:
    return jsonify(version_resource(get_version(runtime(), name, version), with_spec=True))
