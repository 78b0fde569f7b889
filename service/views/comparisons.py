"""Comparisons of succeeded jobs on the same data by PSIS-LOO predictive accuracy (read-only)."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

from service.predictive import comparison
from service.views.context import runtime
from service.views.jobs import _json_body

comparisons = Blueprint("comparisons", __name__, url_prefix="/v1/comparisons")


@comparisons.post("")
def create() -> Response:
    # 200, not 201: nothing is stored; the answer is computed from the jobs' stored values.
    return jsonify(comparison(runtime(), _json_body()))
