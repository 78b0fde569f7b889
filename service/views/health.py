"""Health: liveness, readiness (database and broker reachable), and the OpenAPI document."""

from __future__ import annotations

from pathlib import Path

from flask import Blueprint, Response, jsonify
from sqlalchemy import text

from service.openapi import openapi_document
from service.views.context import runtime

health = Blueprint("health", __name__, url_prefix="/v1")


def _database_check() -> dict:
    try:
        with runtime().engine.connect() as connection:
            connection.execute(text("SELECT 1"))
        return {"ok": True}
    except Exception as error:  # any failure means "not ready"; the detail says which
        return {"ok": False, "detail": f"{type(error).__name__}: {error}"}


def _broker_check() -> dict:
    settings = runtime().settings
    if settings.broker_url.startswith("filesystem://"):
        folder = Path(settings.broker_folder)
        if folder.is_dir():
            return {"ok": True, "detail": "serverless filesystem broker (one machine only)"}
        return {"ok": False, "detail": f"broker folder {folder} does not exist"}
    try:
        with runtime().celery.connection_for_write() as connection:
            connection.ensure_connection(max_retries=1, timeout=2)
        return {"ok": True}
    except Exception as error:  # any failure means "not ready"; the detail says which
        return {"ok": False, "detail": f"{type(error).__name__}: {error}"}


@health.get("/health/live")
def live() -> Response:
    return jsonify({"status": "ok"})


@health.get("/health/ready")
def ready() -> Response:
    checks = {"database": _database_check(), "broker": _broker_check()}
    ok = all(check["ok"] for check in checks.values())
    response = jsonify({"status": "ok" if ok else "unavailable", "checks": checks})
    response.status_code = 200 if ok else 503
    return response


@health.get("/openapi.json")
def openapi() -> Response:
    return jsonify(openapi_document())
