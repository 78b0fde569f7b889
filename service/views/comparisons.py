"""Comparisons of succeeded jobs on the same data: by PSIS-LOO predictive accuracy, and by
Bayes factor from bridge sampling (both read-only)."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

from service.evidence import bayes_factor_document
from service.predictive import comparison
from service.views.context import runtime
from service.views.jobs import _json_body

comparisons = Blueprint("comparisons", __name__, url_prefix="/v1/comparisons")
bayes_factors = Blueprint("bayes_factors", __name__, url_prefix="/v1/bayes-factors")


@comparisons.post("")
def create() -> Response:
    # 200, not 201: nothing is stored; the answer is computed from the jobs' stored values.
    return jsonify(comparison(runtime(), _json_body()))


@bayes_factors.post("")
def create_bayes_factor() -> Response:
    return jsonify(bayes_factor_document(runtime(), _json_body()))
