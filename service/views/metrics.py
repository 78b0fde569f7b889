"""The metrics endpoint a Prometheus server scrapes (GET /metrics)."""

from __future__ import annotations

from flask import Blueprint, Response

from service.metrics import MEDIA_TYPE, exposition
from service.views.context import runtime

metrics = Blueprint("metrics", __name__)


@metrics.get("/metrics")
def scrape() -> Response:
    return Response(exposition(runtime()), content_type=MEDIA_TYPE)
