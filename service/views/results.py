"""A job's results: summary, draws, sampler statistics, diagnostics, predictive accuracy, the
evidence (bridge sampling), the audit record."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from flask import Blueprint, Response, jsonify, request

from service.evidence import evidence_document
from service.formats.downloads import download
from service.formats.negotiation import chosen_format, chosen_layout
from service.predictive import predictive_accuracy
from service.results import (
    audit_document,
    diagnostics_document,
    draw_columns,
    draw_loader,
    finished_job,
    is_partial,
    select_columns,
    stat_loader,
    stat_names,
    summary_document,
)
from service.views.context import runtime

results = Blueprint("results", __name__, url_prefix="/v1/jobs/<job_id>")


@results.get("/summary")
def summary(job_id: str) -> Response:
    job, _ = finished_job(runtime(), job_id, "summary")
    return jsonify(summary_document(job))


@results.get("/diagnostics")
def diagnostics(job_id: str) -> Response:
    job, _ = finished_job(runtime(), job_id, "summary")
    return jsonify(diagnostics_document(job))


@results.get("/draws")
def draws(job_id: str) -> Response:
    return _array_download(
        job_id, "draws", "quantities", draw_columns,
        lambda chains, names: draw_loader(runtime(), chains),
    )


@results.get("/sampler-stats")
def sampler_stats(job_id: str) -> Response:
    return _array_download(
        job_id, "sampler-stats", "statistics", stat_names,
        lambda chains, names: stat_loader(runtime(), chains, names),
    )


def _array_download(
    job_id: str,
    kind: str,
    parameter: str,
    columns_of: Callable[[Any, list[Any]], list[str]],
    loader_of: Callable[[list[Any], list[str]], Any],
) -> Response:
    """A finished job's per-chain arrays in the format, layout and selection the request asks for;
    ``parameter`` is the query parameter that picks the columns."""
    format_name = chosen_format(request)
    layout = chosen_layout(request, format_name)
    job, chains = finished_job(runtime(), job_id, "arrays")
    names = columns_of(runtime(), chains)
    selection = select_columns(
        names,
        chains,
        request.args.get(parameter),
        request.args.get("chains"),
        request.args.get("thin"),
        parameter=parameter,
    )
    return download(
        runtime(), request, kind, job_id, chains, selection, loader_of(chains, names),
        format_name, layout, is_partial(job),
    )


@results.get("/predictive-accuracy")
def loo(job_id: str) -> Response:
    return jsonify(predictive_accuracy(runtime(), job_id))


@results.get("/evidence")
def evidence(job_id: str) -> Response:
    return jsonify(evidence_document(runtime(), job_id))


@results.get("/audit")
def audit(job_id: str) -> Response:
    return jsonify(audit_document(runtime(), job_id))
