"""The OpenAPI 3.1 document, built from the JSON Schemas in schemas/.

Each schema file becomes ``components/schemas/<file stem>``; references between files
(``common.json#/$defs/x``) are rewritten to point inside the document.
"""

from __future__ import annotations

import copy
from functools import cache
from typing import Any

from service.access.authentication import ACCESS_STATUSES
from service.schemas import BASE_URI, load_schemas

PROBLEM = "application/problem+json"

# (method, path) -> {status: response schema stem}; the tests check every answer against it.
# None: an answer without a body (304 Not Modified, RFC 9110 section 15.4.5).
RESPONSES: dict[tuple[str, str], dict[int, str | None]] = {
    ("post", "/v1/jobs"): {
        200: "job",
        202: "job",
        400: "problem",
        409: "problem",
        413: "problem",
        415: "problem",
        422: "problem",
        503: "problem",
    },
    ("get", "/v1/jobs"): {200: "job_list", 400: "problem"},
    ("get", "/v1/jobs/{job_id}"): {200: "job", 304: None, 404: "problem"},
    ("post", "/v1/jobs/{job_id}/cancel"): {200: "job", 404: "problem"},
    ("get", "/v1/jobs/{job_id}/summary"): {
        200: "summary", 304: None, 404: "problem", 409: "problem",
    },
    ("get", "/v1/jobs/{job_id}/draws"): {
        200: "draws",
        304: None,
        400: "problem",
        404: "problem",
        406: "problem",
        409: "problem",
    },
    ("get", "/v1/jobs/{job_id}/sampler-stats"): {
        200: "sampler_stats",
        304: None,
        400: "problem",
        404: "problem",
        406: "problem",
        409: "problem",
    },
    ("get", "/v1/jobs/{job_id}/diagnostics"): {
        200: "diagnostics", 304: None, 404: "problem", 409: "problem",
    },
    ("get", "/v1/jobs/{job_id}/audit"): {200: "audit", 304: None, 404: "problem"},
    ("get", "/v1/jobs/{job_id}/columns"): {
        200: "columns", 304: None, 400: "problem", 404: "problem", 409: "problem",
    },
    ("get", "/v1/jobs/{job_id}/request"): {
        200: "submitted_request", 304: None, 400: "problem", 404: "problem",
    },
    ("get", "/v1/health/live"): {200: "health"},
    ("get", "/v1/health/ready"): {200: "health", 503: "health"},
    ("get", "/v1/models"): {200: "model_list", 400: "problem"},
    ("post", "/v1/models/{name}/versions"): {
        200: "model_version",
        201: "model_version",
        400: "problem",
        404: "problem",
        413: "problem",
        415: "problem",
        422: "problem",
        503: "problem",
    },
    ("get", "/v1/models/{name}/versions"): {
        200: "model_version_list",
        400: "problem",
        404: "problem",
    },
    ("get", "/v1/models/{name}/versions/{version}"): {
        200: "model_version", 304: None, 404: "problem",
    },
}

SUMMARIES = {
    ("post", "/v1/jobs"): "Submit a job (validated whole before anything is stored or queued)",
    ("get", "/v1/jobs"): "List jobs, newest first, filtered by state and labels",
    ("get", "/v1/jobs/{job_id}"): "A job's state, per-chain progress, timings and verdict",
    ("post", "/v1/jobs/{job_id}/cancel"): "Cancel a job; running chains stop within seconds",
    ("get", "/v1/jobs/{job_id}/summary"): "Posterior summary of every quantity",
    ("get", "/v1/jobs/{job_id}/draws"): "Posterior draws, streamed as JSON or CSV",
    ("get", "/v1/jobs/{job_id}/sampler-stats"): "Per-draw sampler statistics, JSON or CSV",
    ("get", "/v1/jobs/{job_id}/diagnostics"): "R-hat, ESS, the sampler report and the verdict",
    ("get", "/v1/jobs/{job_id}/audit"): "Who, when, hashes, seeds, settings and software",
    ("get", "/v1/jobs/{job_id}/columns"): (
        "Each download column's display name, plain name and type"
    ),
    ("get", "/v1/jobs/{job_id}/request"): (
        "The submitted spec, data and settings, whose canonical bytes the audit's hashes cover"
    ),
    ("get", "/v1/health/live"): "The API process is up",
    ("get", "/v1/health/ready"): "The database and the broker are reachable",
    ("get", "/v1/models"): "Registered model names, each with its latest version",
    ("post", "/v1/models/{name}/versions"): (
        "Register a spec as the next version of a name (identical content: the existing version)"
    ),
    ("get", "/v1/models/{name}/versions"): "A model's versions, newest first, with hash and time",
    ("get", "/v1/models/{name}/versions/{version}"): "One version of a model, with its spec",
}

QUERY_PARAMETERS = {
    ("get", "/v1/jobs"): [
        ("state", "Comma-separated states to include."),
        ("verdict", "Comma-separated verdicts to include: passed, failed, none (not judged)."),
        ("label", "key:value; repeat for several (all must match)."),
        ("limit", "Page size."),
        ("cursor", "next_cursor of the previous page."),
    ],
    ("get", "/v1/models"): [
        ("limit", "Page size."),
        ("cursor", "next_cursor of the previous page."),
    ],
    ("get", "/v1/models/{name}/versions"): [
        ("limit", "Page size."),
        ("cursor", "next_cursor of the previous page."),
    ],
    ("get", "/v1/jobs/{job_id}/request"): [
        ("part", "request, spec, data, settings or submission: that part's canonical bytes alone."),
    ],
    ("get", "/v1/jobs/{job_id}/draws"): [
        ("quantities", "Comma-separated quantity names (default all)."),
        ("chains", "Comma-separated chain numbers from 1 (default all)."),
        ("thin", "Keep every k-th draw."),
        ("format", "json, csv, parquet or npz (or send Accept with their media types)."),
        ("layout", "wide (one row per chain and draw) or long (per chain, draw and quantity)."),
        ("names", "display (default: theta[1]) or plain (theta_1, for SQL and dataframes)."),
    ],
    ("get", "/v1/jobs/{job_id}/sampler-stats"): [
        ("statistics", "Comma-separated statistic names (default all)."),
        ("chains", "Comma-separated chain numbers from 1 (default all)."),
        ("thin", "Keep every k-th draw."),
        ("format", "json, csv, parquet or npz (or send Accept with their media types)."),
        ("layout", "wide (one row per chain and draw) or long (per chain, draw and statistic)."),
        ("names", "display (default) or plain (for SQL and dataframes)."),
    ],
}


def _rewrite_refs(node: Any, stem: str) -> Any:
    if isinstance(node, dict):
        out = {}
        for key, value in node.items():
            if key in ("$id", "$schema"):
                continue
            if key == "$ref" and isinstance(value, str):
                out[key] = _component_ref(value, stem)
            else:
                out[key] = _rewrite_refs(value, stem)
        return out
    if isinstance(node, list):
        return [_rewrite_refs(item, stem) for item in node]
    return node


def _component_ref(ref: str, stem: str) -> str:
    ref = ref.removeprefix(BASE_URI)
    target, _, fragment = ref.partition("#")
    target_stem = target.removesuffix(".json") if target else stem
    return f"#/components/schemas/{target_stem}{fragment}"


def component_schemas() -> dict[str, Any]:
    return {stem: _rewrite_refs(copy.deepcopy(s), stem) for stem, s in load_schemas().items()}



# Each path parameter's schema, in the order the parameters appear in a path.
PATH_PARAMETERS = {
    "job_id": "#/components/schemas/common/$defs/job_id",
    "name": "#/components/schemas/model_version/$defs/name",
    "version": "#/components/schemas/model_version/$defs/number",
}


def _operation(method: str, path: str) -> dict[str, Any]:
    responses = {}
    declared = dict(RESPONSES[(method, path)])
    if path.startswith(("/v1/jobs", "/v1/models")):
        # service/access/: no or a wrong key, a missing scope, the rate or job cap reached.
        declared.update({status: "problem" for status in ACCESS_STATUSES})
    for status, stem in declared.items():
        if stem is None:
            responses[str(status)] = {"description": _status_text(status)}
            continue
        media = PROBLEM if stem == "problem" else "application/json"
        content: dict[str, Any] = {media: {"schema": {"$ref": f"#/components/schemas/{stem}"}}}
        if stem in ("draws", "sampler_stats"):
            content["text/csv"] = {"schema": {"type": "string"}}
            content["application/vnd.apache.parquet"] = {"schema": {"type": "string"}}
            content["application/x-npz"] = {"schema": {"type": "string"}}
        responses[str(status)] = {"description": _status_text(status), "content": content}
    operation: dict[str, Any] = {"summary": SUMMARIES[(method, path)], "responses": responses}
    parameters = [
        {"name": name, "in": "path", "required": True, "schema": {"$ref": schema}}
        for name, schema in PATH_PARAMETERS.items()
        if "{" + name + "}" in path
    ]
    parameters += [
        {
            "name": name,
            "in": "query",
            "required": False,
            "description": text,
            "schema": {"type": "string"},
        }
        for name, text in QUERY_PARAMETERS.get((method, path), [])
    ]
    if (method, path) == ("post", "/v1/jobs"):
        parameters.append(
            {
                "name": "Idempotency-Key",
                "in": "header",
                "required": False,
                "description": "Same key and body: the same job; same key, other body: 409.",
                "schema": {"type": "string", "maxLength": 255},
            }
        )
        operation["requestBody"] = {
            "required": True,
            "content": {
                "application/json": {"schema": {"$ref": "#/components/schemas/submission"}}
            },
        }
    if (method, path) == ("post", "/v1/models/{name}/versions"):
        operation["requestBody"] = {
            "required": True,
            "content": {
                "application/json": {
                    "schema": {"$ref": "#/components/schemas/model_registration"}
                }
            },
        }
    if parameters:
        operation["parameters"] = parameters
    return operation


def _status_text(status: int) -> str:
    from http import HTTPStatus

    return HTTPStatus(status).phrase


@cache
def openapi_document() -> dict[str, Any]:
    paths: dict[str, dict[str, Any]] = {}
    for method, path in RESPONSES:
        paths.setdefault(path, {})[method] = _operation(method, path)
    return {
        "openapi": "3.1.0",
        "info": {
            "title": "drawyard",
            "version": "1",
            "description": "Bayesian posterior sampling as queued jobs.",
        },
        "jsonSchemaDialect": "https://json-schema.org/draft/2020-12/schema",
        "paths": paths,
        "components": {"schemas": component_schemas()},
    }
