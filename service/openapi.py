"""The OpenAPI 3.1 document, built from the JSON Schemas in schemas/ and the tables below.

Each schema file becomes ``components/schemas/<file stem>``; references between files
(``common.json#/$defs/x``) are rewritten to point inside the document. Security follows what
service/access/authentication.py checks, from its own constants: the bearer key (RFC 6750) on
every job and model operation with the scope the request needs, the browser session cookie on the
reads, the ``metrics`` scope on /metrics, nothing on health and this document.
"""

from __future__ import annotations

import copy
from functools import cache
from typing import Any

from service.access.authentication import ACCESS_STATUSES, READ_METHODS
from service.access.browser_sessions import SESSION_COOKIE
from service.request_records import REQUEST_ID_HEADER
from service.schemas import BASE_URI, load_schemas

PROBLEM = "application/problem+json"
# Answers that are not JSON: the metrics exposition (text) and this document itself.
EXPOSITION = "exposition"
DOCUMENT = "openapi"

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
    ("get", "/v1/jobs/{job_id}/predictive-accuracy"): {
        200: "predictive_accuracy",
        404: "problem",
        409: "problem",
    },
    ("get", "/v1/jobs/{job_id}/evidence"): {
        200: "evidence",
        404: "problem",
        409: "problem",
        422: "problem",
    },
    ("post", "/v1/bayes-factors"): {
        200: "bayes_factor",
        400: "problem",
        415: "problem",
        422: "problem",
    },
    ("post", "/v1/comparisons"): {
        200: "comparison",
        400: "problem",
        415: "problem",
        422: "problem",
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
    ("get", "/metrics"): {200: EXPOSITION},
    ("get", "/v1/openapi.json"): {200: DOCUMENT},
}

# operationId: one name per operation, for generated clients.
OPERATION_IDS = {
    ("post", "/v1/jobs"): "submitJob",
    ("get", "/v1/jobs"): "listJobs",
    ("get", "/v1/jobs/{job_id}"): "getJob",
    ("post", "/v1/jobs/{job_id}/cancel"): "cancelJob",
    ("get", "/v1/jobs/{job_id}/summary"): "getJobSummary",
    ("get", "/v1/jobs/{job_id}/draws"): "getJobDraws",
    ("get", "/v1/jobs/{job_id}/sampler-stats"): "getJobSamplerStats",
    ("get", "/v1/jobs/{job_id}/diagnostics"): "getJobDiagnostics",
    ("get", "/v1/jobs/{job_id}/audit"): "getJobAudit",
    ("get", "/v1/jobs/{job_id}/columns"): "getJobColumns",
    ("get", "/v1/jobs/{job_id}/request"): "getJobRequest",
    ("get", "/v1/jobs/{job_id}/predictive-accuracy"): "getJobPredictiveAccuracy",
    ("get", "/v1/jobs/{job_id}/evidence"): "getJobEvidence",
    ("post", "/v1/bayes-factors"): "computeBayesFactor",
    ("post", "/v1/comparisons"): "compareJobs",
    ("get", "/v1/health/live"): "getLiveness",
    ("get", "/v1/health/ready"): "getReadiness",
    ("get", "/v1/models"): "listModels",
    ("post", "/v1/models/{name}/versions"): "registerModelVersion",
    ("get", "/v1/models/{name}/versions"): "listModelVersions",
    ("get", "/v1/models/{name}/versions/{version}"): "getModelVersion",
    ("get", "/metrics"): "scrapeMetrics",
    ("get", "/v1/openapi.json"): "getOpenApiDocument",
}

SECURITY_SCHEMES = {
    "bearerKey": {
        "type": "http",
        "scheme": "bearer",
        "description": "An API key from `drawyard keys create`, as 'Authorization: Bearer <key>'.",
    },
    "browserSession": {
        "type": "apiKey",
        "in": "cookie",
        "name": SESSION_COOKIE,
        "description": "The session a browser gets by signing in on /sign-in; reads only.",
    },
}

# Response headers, by (method, path, status); "required" where the view always sends them.
HEADERS = {
    "Location": {"description": "Where the job (or the model version) lives.",
                 "schema": {"type": "string"}},
    "Retry-After": {"description": "Seconds to wait before asking again (RFC 9110 10.2.3).",
                    "schema": {"type": "integer", "minimum": 0}},
    "ETag": {"description": "Strong entity tag of this download (RFC 9110 8.8.3).",
             "schema": {"type": "string"}},
    "WWW-Authenticate": {"description": "The bearer challenge (RFC 6750 section 3).",
                         "schema": {"type": "string"}},
    REQUEST_ID_HEADER: {"description": "The request's id: the caller's X-Request-Id when well "
                                       "formed, else a new one; it is on every log line.",
                        "schema": {"type": "string"}},
}
RESPONSE_HEADERS: dict[tuple[str, str, int], dict[str, bool]] = {
    ("post", "/v1/jobs", 200): {"Location": True},
    ("post", "/v1/jobs", 202): {"Location": True, "Retry-After": False},
    ("post", "/v1/jobs", 503): {"Retry-After": False},
    ("get", "/v1/jobs/{job_id}", 200): {"Retry-After": False},
    ("post", "/v1/jobs/{job_id}/cancel", 200): {"Retry-After": False},
    ("post", "/v1/models/{name}/versions", 200): {"Location": True},
    ("post", "/v1/models/{name}/versions", 201): {"Location": True},
    ("post", "/v1/models/{name}/versions", 503): {"Retry-After": False},
    ("get", "/v1/jobs/{job_id}/draws", 200): {"ETag": True},
    ("get", "/v1/jobs/{job_id}/draws", 304): {"ETag": True},
    ("get", "/v1/jobs/{job_id}/sampler-stats", 200): {"ETag": True},
    ("get", "/v1/jobs/{job_id}/sampler-stats", 304): {"ETag": True},
}
# On every guarded operation: the access check's answers.
ACCESS_HEADERS = {401: {"WWW-Authenticate": True}, 429: {"Retry-After": True}}

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
    ("get", "/v1/jobs/{job_id}/predictive-accuracy"): (
        "PSIS-LOO from the stored pointwise log likelihood: elpd_loo, p_loo, Pareto k-hat"
    ),
    ("get", "/v1/jobs/{job_id}/evidence"): (
        "Log marginal likelihood by bridge sampling, with its error (proper priors only)"
    ),
    ("post", "/v1/bayes-factors"): "The Bayes factor of two succeeded jobs on the same data",
    ("post", "/v1/comparisons"): (
        "Order succeeded jobs on the same data by elpd_loo, with paired differences (read-only)"
    ),
    ("get", "/v1/health/live"): "The API process is up",
    ("get", "/v1/health/ready"): "The database and the broker are reachable",
    ("get", "/v1/models"): "Registered model names, each with its latest version",
    ("post", "/v1/models/{name}/versions"): (
        "Register a spec as the next version of a name (identical content: the existing version)"
    ),
    ("get", "/v1/models/{name}/versions"): "A model's versions, newest first, with hash and time",
    ("get", "/v1/models/{name}/versions/{version}"): "One version of a model, with its spec",
    ("get", "/metrics"): "Counters, histograms and store gauges in the Prometheus text format",
    ("get", "/v1/openapi.json"): "This document",
}

QUERY_PARAMETERS = {
    ("get", "/v1/jobs"): [
        ("state", "Comma-separated states to include."),
        ("verdict", "Comma-separated verdicts to include: passed, failed, none (not judged)."),
        ("label", "key:value; repeat for several (all must match)."),
        ("limit", "Page size (at most DRAWYARD_MAX_PAGE_LIMIT)."),
        ("cursor", "next_cursor of the previous page."),
    ],
    ("get", "/v1/models"): [
        ("limit", "Page size (at most DRAWYARD_MAX_PAGE_LIMIT)."),
        ("cursor", "next_cursor of the previous page."),
    ],
    ("get", "/v1/models/{name}/versions"): [
        ("limit", "Page size (at most DRAWYARD_MAX_PAGE_LIMIT)."),
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


# Query parameters that are whole numbers (service/views/paging.py, service/formats/); the rest are
# strings.
INTEGER_PARAMETERS = {"limit": {"type": "integer", "minimum": 1},
                      "thin": {"type": "integer", "minimum": 1}}
# Downloads answer 304 to a current If-None-Match (service/formats/etags.py).
CONDITIONAL = frozenset({("get", "/v1/jobs/{job_id}/draws"),
                         ("get", "/v1/jobs/{job_id}/sampler-stats")})
GUARDED_PREFIXES = ("/v1/jobs", "/v1/models", "/v1/comparisons", "/v1/bayes-factors", "/metrics")


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


def _security(method: str, path: str) -> list[dict[str, list[str]]]:
    """Who may call: the scope needed (service/access/authentication.needed_scope), and the
    browser session for the reads."""
    if not path.startswith(GUARDED_PREFIXES):
        return []
    if path == "/metrics":
        return [{"bearerKey": ["metrics"]}]
    if method.upper() in READ_METHODS:
        return [{"bearerKey": ["read"]}, {"browserSession": ["read"]}]
    return [{"bearerKey": ["submit"]}]


def _headers(method: str, path: str, status: int) -> dict[str, Any]:
    wanted = {REQUEST_ID_HEADER: True, **RESPONSE_HEADERS.get((method, path, status), {})}
    if path.startswith(GUARDED_PREFIXES):
        wanted.update(ACCESS_HEADERS.get(status, {}))
    return {name: {**HEADERS[name], "required": required} for name, required in wanted.items()}


def _content(stem: str) -> dict[str, Any]:
    if stem == EXPOSITION:
        return {"text/plain": {"schema": {"type": "string"}}}
    if stem == DOCUMENT:
        return {"application/json": {"schema": {"type": "object"}}}
    media = PROBLEM if stem == "problem" else "application/json"
    content: dict[str, Any] = {media: {"schema": {"$ref": f"#/components/schemas/{stem}"}}}
    if stem in ("draws", "sampler_stats"):
        content["text/csv"] = {"schema": {"type": "string"}}
        content["application/vnd.apache.parquet"] = {"schema": {"type": "string"}}
        content["application/x-npz"] = {"schema": {"type": "string"}}
    return content


def _operation(method: str, path: str) -> dict[str, Any]:
    responses = {}
    declared = dict(RESPONSES[(method, path)])
    if path.startswith(GUARDED_PREFIXES):
        # service/access/: no or a wrong key, a missing scope, the rate or job cap reached.
        declared.update({status: "problem" for status in ACCESS_STATUSES})
    for status, stem in declared.items():
        answer: dict[str, Any] = {"description": _status_text(status)}
        if stem is not None:
            answer["content"] = _content(stem)
        answer["headers"] = _headers(method, path, status)
        responses[str(status)] = answer
    operation: dict[str, Any] = {
        "operationId": OPERATION_IDS[(method, path)],
        "summary": SUMMARIES[(method, path)],
        "security": _security(method, path),
        "responses": responses,
    }
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
            "schema": INTEGER_PARAMETERS.get(name, {"type": "string"}),
        }
        for name, text in QUERY_PARAMETERS.get((method, path), [])
    ]
    parameters.append(
        {
            "name": REQUEST_ID_HEADER,
            "in": "header",
            "required": False,
            "description": "An id for this request (1 to 128 of A-Z a-z 0-9 - . _ :); any other "
            "value is replaced by a new id. Answered in X-Request-Id and written on every log "
            "line the request causes.",
            "schema": {"type": "string"},
        }
    )
    if (method, path) in CONDITIONAL:
        parameters.append(
            {
                "name": "If-None-Match",
                "in": "header",
                "required": False,
                "description": "ETags of copies the client holds; a current one answers 304.",
                "schema": {"type": "string"},
            }
        )
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
    if (method, path) in (("post", "/v1/comparisons"), ("post", "/v1/bayes-factors")):
        operation["requestBody"] = {
            "required": True,
            "content": {
                "application/json": {
                    "schema": {"$ref": "#/components/schemas/comparison_request"}
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
        # Relative: the document describes the server that serves it.
        "servers": [{"url": "/"}],
        "paths": paths,
        "components": {"schemas": component_schemas(), "securitySchemes": SECURITY_SCHEMES},
    }
