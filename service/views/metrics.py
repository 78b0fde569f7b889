"""The metrics endpoint a Prometheus server scrapes (GET /metrics; the "metrics" scope once keys
exist, service/access/authentication.py)."""

from __future__ import annotations

from flask import Blueprint, Response, request

from service.metrics import exposition
from service.views.context import runtime

metrics = Blueprint("metrics", __name__)


@metrics.get("/metrics")
def scrape() -> Response:
    body, media_type = exposition(runtime(), request.headers.get("Accept", ""))
    return Response(body, content_type=media_type)
