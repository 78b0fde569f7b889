"""A job's results: summary, draws, sampler statistics, diagnostics, the audit record."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify, request, stream_with_context

from service.draw_export import stream_csv, stream_json
from service.problem_details import ApiProblem
from service.results import (
    audit_document,
    diagnostics_document,
    draw_columns,
    draw_loader,
    finished_job,
    select_columns,
    stat_loader,
    stat_names,
    summary_document,
)
from service.views.context import runtime

results = Blueprint("results", __name__, url_prefix="/v1/jobs/<job_id>")


def _wants_csv() -> bool:
    chosen = request.args.get("format")
    if chosen is not None:
        if chosen not in ("json", "csv"):
            raise ApiProblem(
                406,
                "unsupported-format",
                "Unsupported format",
                "The format is json or csv.",
                [{"parameter": "format", "message": "json or csv"}],
            )
        return chosen == "csv"
    best = request.accept_mimetypes.best_match(["application/json", "text/csv"])
    if best is None and request.accept_mimetypes:
        raise ApiProblem(
            406,
            "unsupported-format",
            "Unsupported format",
            "These results come as application/json or text/csv.",
        )
    return best == "text/csv"


def _stream(chunks, mimetype: str, filename: str | None = None) -> Response:
    response = Response(stream_with_context(chunks), mimetype=mimetype)
    if filename:
        response.headers["Content-Disposition"] = f'attachment; filename="{filename}"'
    return response


@results.get("/summary")
def summary(job_id: str) -> Response:
    job, _ = finished_job(runtime(), job_id)
    return jsonify(summary_document(job))


@results.get("/diagnostics")
def diagnostics(job_id: str) -> Response:
    job, _ = finished_job(runtime(), job_id)
    return jsonify(diagnostics_document(job))


@results.get("/draws")
def draws(job_id: str) -> Response:
    csv = _wants_csv()
    _, chains = finished_job(runtime(), job_id)
    names = draw_columns(runtime(), chains)
    selection = select_columns(
        names,
        chains,
        request.args.get("quantities"),
        request.args.get("chains"),
        request.args.get("thin"),
    )
    load = draw_loader(runtime(), chains)
    if csv:
        return _stream(
            stream_csv(selection, load, selection.names), "text/csv", f"{job_id}-draws.csv"
        )
    return _stream(stream_json(job_id, "quantities", selection, load), "application/json")


@results.get("/sampler-stats")
def sampler_stats(job_id: str) -> Response:
    csv = _wants_csv()
    _, chains = finished_job(runtime(), job_id)
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
    if csv:
        return _stream(
            stream_csv(selection, load, selection.names), "text/csv", f"{job_id}-sampler-stats.csv"
        )
    return _stream(stream_json(job_id, "statistics", selection, load), "application/json")


@results.get("/audit")
def audit(job_id: str) -> Response:
    return jsonify(audit_document(runtime(), job_id))
