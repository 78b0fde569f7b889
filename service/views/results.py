"""A job's results: summary, draws, sampler statistics, diagnostics, predictive accuracy, the
evidence (bridge sampling), the audit record."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from typing import Any

from flask import Blueprint, Response, jsonify, request

from service.evidence import evidence_document
from service.formats.column_types import draw_types, stat_types
from service.formats.downloads import download
from service.formats.negotiation import chosen_format, chosen_layout
from service.formats.plain_names import chosen_naming, plain_name, plain_names
from service.http_caching import cached_json, canonical_part
from service.job_queries import bad_parameter
from service.predictive import predictive_accuracy
from service.results import (
    audit_document,
    diagnostics_document,
    draw_columns,
    draw_loader,
    finished_job,
    is_final,
    is_partial,
    request_document,
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
    return cached_json(summary_document(job), is_final(job))


@results.get("/diagnostics")
def diagnostics(job_id: str) -> Response:
    job, _ = finished_job(runtime(), job_id, "summary")
    return cached_json(diagnostics_document(job), is_final(job))


@results.get("/draws")
def draws(job_id: str) -> Response:
    return _array_download(
        job_id, "draws", "quantities", draw_columns,
        lambda chains, names: draw_loader(runtime(), chains), draw_types,
    )


@results.get("/sampler-stats")
def sampler_stats(job_id: str) -> Response:
    return _array_download(
        job_id, "sampler-stats", "statistics", stat_names,
        lambda chains, names: stat_loader(runtime(), chains, names), stat_types,
    )


def _array_download(
    job_id: str,
    kind: str,
    parameter: str,
    columns_of: Callable[[Any, list[Any]], list[str]],
    loader_of: Callable[[list[Any], list[str]], Any],
    types_of: Callable[[Any, list[Any]], list[str]],
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
    kinds = types_of(runtime(), chains)
    selection = replace(selection, types=tuple(kinds[i] for i in selection.columns))
    if chosen_naming(request.args.get("names")) == "plain":
        selection = replace(selection, names=plain_names(selection.names))
    return download(
        runtime(), request, kind, job_id, chains, selection, loader_of(chains, names),
        format_name, layout, is_partial(job), is_final(job),
    )


@results.get("/predictive-accuracy")
def loo(job_id: str) -> Response:
    return jsonify(predictive_accuracy(runtime(), job_id))


@results.get("/evidence")
def evidence(job_id: str) -> Response:
    return jsonify(evidence_document(runtime(), job_id))


@results.get("/audit")
def audit(job_id: str) -> Response:
    # Never immutable: delivery attempts of a completion callback are logged after the job ends.
    return cached_json(audit_document(runtime(), job_id), final=False)


@results.get("/request")
def submitted(job_id: str) -> Response:
    """What was submitted: the spec, data and settings, and the body as sent. With
    ``?part=request|spec|data|settings`` the canonical bytes of that part alone, whose SHA-256 is
    the audit record's digest of it."""
    document, parts = request_document(runtime(), job_id)
    part = request.args.get("part")
    if part is None:
        return cached_json(document, final=True)
    if part not in parts:
        raise bad_parameter("part", f"The part is one of {', '.join(parts)}.")
    return canonical_part(parts[part])


@results.get("/columns")
def columns(job_id: str) -> Response:
    """Each download column: its display name, its plain name (``?names=plain``) and its type."""
    job, chains = finished_job(runtime(), job_id, "arrays")

    def described(names: list[str], kinds: list[str]) -> list[dict[str, str]]:
        plain_names(names)  # refuses a job whose plain names would collide
        return [
            {"name": n, "plain": plain_name(n), "type": k}
            for n, k in zip(names, kinds, strict=True)
        ]

    fixed = [{"name": n, "plain": n, "type": "int64"} for n in ("chain", "draw")]
    document = {
        "job": job.id,
        "draws": fixed + described(draw_columns(runtime(), chains), draw_types(runtime(), chains)),
        "sampler_stats": fixed
        + described(stat_names(runtime(), chains), stat_types(runtime(), chains)),
    }
    return cached_json(document, is_final(job))
