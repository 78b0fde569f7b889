"""A job's results: summary, draws, sampler statistics, diagnostics, the audit record."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify, request

from service.formats.downloads import download
from service.formats.negotiation import chosen_format, chosen_layout
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
    format_name = chosen_format(request)
    layout = chosen_layout(request, format_name)
    job, chains = finished_job(runtime(), job_id, "arrays")
    names = draw_columns(runtime(), chains)
    selection = select_columns(
        names,
        chains,
        request.args.get("quantities"),
        request.args.get("chains"),
        request.args.get("thin"),
    )
    load = draw_loader(runtime(), chains)
    return download(
        runtime(), request, "draws", job_id, chains, selection, load, format_name, layout,
        is_partial(job),
    )


@results.get("/sampler-stats")
def sampler_stats(job_id: str) -> Response:
    format_name = chosen_format(request)
    layout = chosen_layout(request, format_name)
    job, chains = finished_job(runtime(), job_id, "arrays")
    names = stat_names(runtime(), chains)
    selection = select_columns(
        names,
        chains,
        request.args.get("statistics"),
        request.args.get("chains"),
        request.args.get("thin"),
        parameter="statistics",
    )
    load = stat_loader(runtime(), chains, names)
    return download(
        runtime(), request, "sampler-stats", job_id, chains, selection, load, format_name, layout,
        is_partial(job),
    )


@results.get("/audit")
def audit(job_id: str) -> Response:
    return jsonify(audit_document(runtime(), job_id))
