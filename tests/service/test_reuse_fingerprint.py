"""The run fingerprint names what fixes a job's draws and verdict, not how the body spelled it.

Checks given explicitly at their default values, or as 400.0 instead of 400, lead to the same
verdict as checks left out (worker/diagnostics/thresholds.py: defaults overlaid with the given
thresholds, compared as numbers), so such a submission must reuse the earlier result
(docs/registry.md, "Result reuse"). A threshold switched off (null) or changed is a different
verdict: no reuse.
Jobs are run in process by the service's own chain and finishing code on a real SQLite store.
"""

from __future__ import annotations

from flask import Flask

from tests.service.bodies import normal_mean
from tests.service.test_registry_views import call, run_to_the_end
from worker.diagnostics.thresholds import DEFAULT_THRESHOLDS


def _earlier(app: Flask, seed: int, **members) -> tuple[dict, str]:
    body = {**normal_mean(chains=2, warmup=100, draws=100, seed=seed), **members}
    response, job = call(app.test_client(), "POST", "/v1/jobs", body)
    assert response.status_code == 202
    run_to_the_end(app, job["id"], 2)
    return body, job["id"]


def test_checks_at_their_defaults_or_as_floats_reuse_a_job_that_gave_none(app: Flask, queue):
    body, first = _earlier(app, seed=31)
    client = app.test_client()
    spelled = [
        dict(DEFAULT_THRESHOLDS),
        dict(reversed(list(DEFAULT_THRESHOLDS.items()))),
        {"min_bulk_ess": 400.0, "max_divergences": 0.0},
        {},
    ]
    for checks in spelled:
        response, job = call(client, "POST", "/v1/jobs", {**body, "checks": checks})
        assert response.status_code == 202
        assert job["reused_from"] == first, checks
        assert job["verdict"] == call(client, "GET", f"/v1/jobs/{first}")[1]["verdict"]


def test_a_job_that_gave_its_checks_is_reused_by_one_that_leaves_them_out(app: Flask, queue):
    body, first = _earlier(app, seed=32, checks={"min_bulk_ess": 400, "max_rhat": 1.01})
    plain = {key: value for key, value in body.items() if key != "checks"}
    response, job = call(app.test_client(), "POST", "/v1/jobs", plain)
    assert response.status_code == 202 and job["reused_from"] == first


def test_a_changed_or_disabled_threshold_is_not_reused(app: Flask, queue):
    body, first = _earlier(app, seed=33)
    client = app.test_client()
    for checks in ({"min_bulk_ess": 401}, {"min_ebfmi": None}, {"max_depth_saturation": 0.5}):
        response, job = call(client, "POST", "/v1/jobs", {**body, "checks": checks})
        assert response.status_code == 202
        assert job["reused_from"] is None and job["state"] == "queued", checks


def test_joint_pattern_tables_asked_for_are_part_of_the_fingerprint(app: Flask, queue):
    """A job that asks for a pattern table is not answered by one that did not make it, and the
    other way round; the same request reuses the result, tables and all."""
    body = normal_mean(chains=2, warmup=100, draws=100, seed=34)
    body["model"]["per_draw"] = {"predictions": [
        {"name": "above", "distribution": "bernoulli", "arguments": {"probability": "logistic(mu)"}}
    ]}
    client = app.test_client()
    response, first = call(client, "POST", "/v1/jobs", {**body, "summary": {"patterns": ["above"]}})
    assert response.status_code == 202
    run_to_the_end(app, first["id"], 2)
    _, plain = call(client, "POST", "/v1/jobs", body)
    assert plain["reused_from"] is None and plain["state"] == "queued"
    _, again = call(client, "POST", "/v1/jobs", {**body, "summary": {"patterns": ["above"]}})
    assert again["reused_from"] == first["id"]
    tables = [call(client, "GET", f"/v1/jobs/{j}/summary")[1]["patterns"]
              for j in (first["id"], again["id"])]
    assert tables[0] == tables[1] and [t["name"] for t in tables[0]] == ["above"]
