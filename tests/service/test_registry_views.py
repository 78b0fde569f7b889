"""The model registry, model_ref submissions, result reuse and warm-start checks, with Flask's
test client on a real SQLite store and a real Redis broker.

Standards checked: RFC 9110 (201 Created with Location for a new version, 200 for one that
already existed, 404 for another tenant's or an unknown model), RFC 9457 problem documents with
RFC 6901 pointers, FIPS 180-4 SHA-256 (Python's hashlib) of the canonical JSON for the version
hash. Jobs that must have succeeded first are run by the service's own chain and finishing code
(service.chain_work.run_chain, service.finishing.finish) in this process, on the same store.
"""

from __future__ import annotations

import copy
import hashlib
import json

import pytest
from sqlalchemy import func, select

from service.canonical import jcs_json
from service.chain_work import run_chain
from service.finishing import finish
from service.store.models import ChainArray, Job, ModelVersion
from service.warm_start import DEFAULT_WARM_WARMUP
from tests.security.access_helpers import create_key
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from tests.service.store_probe import row_counts

SPEC = normal_mean()["model"]
DATA = normal_mean()["data"]


def canonical_sha256(value) -> str:
    """RFC 8785 canonical JSON (service.canonical.jcs_json, checked on the RFC's own examples in
    tests/canonical/test_rfc8785.py), then SHA-256."""
    return hashlib.sha256(jcs_json(value)).hexdigest()


def call(client, method, path, body=None):
    response = client.open(path, method=method, json=body)
    return response, check_flask(method, path, response)


def register(client, name, spec):
    return call(client, "POST", f"/v1/models/{name}/versions", {"model": spec})


def by_ref(name, version=None, **sampler):
    body = normal_mean(**sampler)
    del body["model"]
    body["model_ref"] = {"name": name} if version is None else {"name": name, "version": version}
    return body


def model_rows(app) -> int:
    with app.extensions["drawyard"].sessions() as session:
        return session.scalar(select(func.count()).select_from(ModelVersion))


def run_to_the_end(app, job_id: str, chains: int) -> None:
    runtime = app.extensions["drawyard"]
    for index in range(chains):
        assert run_chain(runtime, job_id, index).status == "succeeded"
    assert finish(runtime, job_id) == "succeeded"


def test_registering_numbers_versions_and_identical_content_returns_the_existing_one(app):
    client = app.test_client()
    first, v1 = register(client, "demand", SPEC)
    assert first.status_code == 201 and v1["version"] == 1
    assert first.headers["Location"] == "/v1/models/demand/versions/1"
    assert v1["sha256"] == canonical_sha256(SPEC) and v1["model"] == SPEC
    # The same content with its keys in another order is the same canonical JSON.
    shuffled = json.loads(json.dumps(dict(reversed(list(SPEC.items())))))
    again, same = register(client, "demand", shuffled)
    assert again.status_code == 200 and same["version"] == 1
    changed = copy.deepcopy(SPEC)
    changed["priors"][0]["arguments"]["scale"] = 5
    second, v2 = register(client, "demand", changed)
    assert second.status_code == 201 and v2["version"] == 2
    assert second.headers["Location"] == "/v1/models/demand/versions/2"
    other, o1 = register(client, "other-model", changed)
    assert other.status_code == 201 and o1["version"] == 1
    assert model_rows(app) == 3


def test_an_invalid_spec_is_refused_with_pointers_and_nothing_is_registered(app):
    client = app.test_client()
    bad = copy.deepcopy(SPEC)
    bad["priors"][0]["distribution"] = "nromal"
    bad["likelihood"][0]["arguments"]["location"] = "mu + zz"
    response, problem = register(client, "demand", bad)
    assert response.status_code == 422
    pointers = {e["pointer"] for e in problem["errors"]}
    assert pointers == {"/model/priors/0/distribution", "/model/likelihood/0/arguments/location"}
    response, problem = call(client, "POST", "/v1/models/demand/versions", {"spec": SPEC})
    assert response.status_code == 422
    assert {e["pointer"] for e in problem["errors"]} == {"/spec", "/model"}
    response, problem = call(client, "POST", "/v1/models/demand/versions", [1])
    assert response.status_code == 422
    response, problem = register(client, "-not-a-name", SPEC)
    assert response.status_code == 400 and problem["errors"][0]["parameter"] == "name"
    assert model_rows(app) == 0


def test_listings_are_paginated_newest_version_first(app):
    client = app.test_client()  # the app's page size is 3
    for scale in range(1, 6):
        spec = copy.deepcopy(SPEC)
        spec["priors"][0]["arguments"]["scale"] = scale
        register(client, "demand", spec)
    register(client, "alpha", SPEC)
    seen, path = [], "/v1/models/demand/versions"
    while path:
        response, page = call(client, "GET", path)
        assert response.status_code == 200 and len(page["versions"]) <= 3
        assert all(v["created_at"] and "model" not in v for v in page["versions"])
        seen += [v["version"] for v in page["versions"]]
        path = page["next_cursor"] and f"/v1/models/demand/versions?cursor={page['next_cursor']}"
    assert seen == [5, 4, 3, 2, 1]
    _, names = call(client, "GET", "/v1/models")
    assert [(m["name"], m["latest_version"]) for m in names["models"]] == [
        ("alpha", 1),
        ("demand", 5),
    ]
    response, one = call(client, "GET", "/v1/models/demand/versions/4")
    assert response.status_code == 200 and one["model"]["priors"][0]["arguments"]["scale"] == 4
    for path in (
        "/v1/models/demand/versions/6",
        "/v1/models/nothing/versions/1",
        "/v1/models/nothing/versions",
        "/v1/models/demand/versions/99999999999999",
    ):
        assert call(client, "GET", path)[0].status_code == 404, path
    response, _ = call(client, "GET", "/v1/models/demand/versions?cursor=bogus")
    assert response.status_code == 400
    response, _ = call(client, "GET", "/v1/models?limit=0")
    assert response.status_code == 400


def test_a_job_by_model_ref_runs_the_registered_spec_and_records_name_version_and_hash(
    app, queue
):
    client = app.test_client()
    register(client, "demand", SPEC)
    changed = copy.deepcopy(SPEC)
    changed["priors"][0]["arguments"]["scale"] = 5
    register(client, "demand", changed)
    response, job = call(client, "POST", "/v1/jobs", by_ref("demand", 1))
    assert response.status_code == 202 and queue.length() == 2
    assert job["model_ref"] == {"name": "demand", "version": 1, "sha256": canonical_sha256(SPEC)}
    _, audit = call(client, "GET", f"/v1/jobs/{job['id']}/audit")
    assert audit["model_ref"] == job["model_ref"]
    assert audit["hashes"]["model"] == canonical_sha256(SPEC)
    # Left out, the version is the latest, and the one used is recorded.
    _, latest = call(client, "POST", "/v1/jobs", by_ref("demand"))
    assert latest["model_ref"]["version"] == 2
    assert latest["model_ref"]["sha256"] == canonical_sha256(changed)
    with app.extensions["drawyard"].sessions() as session:
        stored = session.scalar(select(Job.body).where(Job.id == latest["id"]))
    assert stored["model"] == changed and stored["model_ref"] == {"name": "demand", "version": 2}


REF_CASES = [
    ("both model and model_ref", lambda b: {**b, "model": SPEC}, "/model_ref"),
    ("neither", lambda b: {k: v for k, v in b.items() if k != "model_ref"}, "/model"),
    ("unknown name", lambda b: {**b, "model_ref": {"name": "nope", "version": 1}},
     "/model_ref/name"),
    ("unknown version", lambda b: {**b, "model_ref": {"name": "demand", "version": 7}},
     "/model_ref/version"),
    ("bad version", lambda b: {**b, "model_ref": {"name": "demand", "version": 0}},
     "/model_ref/version"),
    ("bad name", lambda b: {**b, "model_ref": {"name": "a b"}}, "/model_ref/name"),
    ("extra member", lambda b: {**b, "model_ref": {"name": "demand", "x": 1}}, "/model_ref/x"),
    ("data the model cannot take", lambda b: {**b, "data": {"n": 2, "y": [1.0, "x"]}}, "/data/y"),
    ("warm start from nothing", lambda b: {**b, "warm_start": {"job": "0" * 32}},
     "/warm_start/job"),
    ("warm start id malformed", lambda b: {**b, "warm_start": {"job": "xyz"}}, "/warm_start/job"),
    ("warm start with chains sent", lambda b: {**b, "warm_start": {"job": "0" * 32, "chains": []}},
     "/warm_start/chains"),
]  # fmt: skip


@pytest.mark.parametrize("case, change, where", REF_CASES, ids=[c[0] for c in REF_CASES])
def test_bad_model_refs_and_warm_starts_are_422_with_nothing_stored_or_queued(
    app, queue, case, change, where
):
    client = app.test_client()
    register(client, "demand", SPEC)
    response, problem = call(client, "POST", "/v1/jobs", change(by_ref("demand", 1)))
    assert response.status_code == 422, problem
    assert where in {e["pointer"] for e in problem["errors"]}, problem["errors"]
    assert row_counts(app) == {"jobs": 0, "chains": 0, "events": 0}
    assert queue.length() == 0


def test_another_tenants_models_and_jobs_are_not_found(app, queue, sqlite_store):
    ours = create_key(sqlite_store, "north")
    theirs = create_key(sqlite_store, "south")
    readonly = create_key(sqlite_store, "north", "read")
    client = app.test_client()
    north, south = ours.headers, theirs.headers
    refused = client.post("/v1/models/x/versions", json={"model": SPEC}, headers=readonly.headers)
    assert refused.status_code == 403
    assert client.get("/v1/models", headers=readonly.headers).status_code == 200
    created = client.post("/v1/models/demand/versions", json={"model": SPEC}, headers=north)
    assert created.status_code == 201 and created.get_json()["created_by"]
    assert client.get("/v1/models/demand/versions/1", headers=south).status_code == 404
    assert client.get("/v1/models", headers=south).get_json()["models"] == []
    body = by_ref("demand", 1)
    refused = client.post("/v1/jobs", json=body, headers=south)
    assert refused.status_code == 422
    assert refused.get_json()["errors"][0]["pointer"] == "/model_ref/name"
    # The same name in the other tenant is a model of its own, numbered from 1.
    again = client.post("/v1/models/demand/versions", json={"model": SPEC}, headers=south)
    assert again.status_code == 201 and again.get_json()["version"] == 1
    job = client.post("/v1/jobs", json=normal_mean(), headers=north).get_json()
    warm = {**normal_mean(), "warm_start": {"job": job["id"]}}
    refused = client.post("/v1/jobs", json=warm, headers=south).get_json()
    assert refused["errors"][0]["pointer"] == "/warm_start/job"
    assert "There is no job" in refused["errors"][0]["message"]
    reads = client.get("/v1/models", headers={"Authorization": f"Bearer {ours.secret}x"})
    assert reads.status_code == 401


def test_a_repeat_with_the_same_seed_reuses_the_result_and_queues_nothing(app, queue):
    client = app.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=7)
    _, first = call(client, "POST", "/v1/jobs", body)
    queue.client.delete(queue.name)
    run_to_the_end(app, first["id"], 2)
    before = queue.length()
    response, again = call(client, "POST", "/v1/jobs", {**body, "labels": {"run": "second"}})
    assert response.status_code == 202 and response.headers["Location"].endswith(again["id"])
    assert again["id"] != first["id"] and again["state"] == "succeeded"
    assert again["reused_from"] == first["id"] and again["labels"] == {"run": "second"}
    assert queue.length() == before  # nothing queued for a reused job
    _, source = call(client, "GET", f"/v1/jobs/{first['id']}")
    assert again["verdict"] == source["verdict"]
    assert [c["state"] for c in again["chains"]] == ["succeeded"] * 2
    assert all(c["attempts"] == 0 and c["started_at"] is None for c in again["chains"])
    assert again["started_at"] == again["finished_at"] is not None
    # The web page and its plots read a reused job like any other.
    assert client.get(f"/jobs/{again['id']}").status_code == 200
    plot = client.get(f"/jobs/{again['id']}/plots/trace.svg?quantity=mu")
    assert plot.status_code == 200 and plot.mimetype == "image/svg+xml"
    for resource in ("summary", "diagnostics"):
        _, copied = call(client, "GET", f"/v1/jobs/{again['id']}/{resource}")
        _, original = call(client, "GET", f"/v1/jobs/{first['id']}/{resource}")
        assert copied["quantities"] == original["quantities"]
    draws = [client.get(f"/v1/jobs/{j}/draws").get_json() for j in (first["id"], again["id"])]
    assert draws[0]["chains"] == draws[1]["chains"]
    _, audit = call(client, "GET", f"/v1/jobs/{again['id']}/audit")
    assert audit["reused_from"] == first["id"]
    assert [e["kind"] for e in audit["events"]] == ["result_reused", "job_state"]
    assert audit["events"][0]["detail"] == {"source": first["id"]}
    _, first_audit = call(client, "GET", f"/v1/jobs/{first['id']}/audit")
    assert audit["hashes"]["run"] == first_audit["hashes"]["run"]
    assert [c["draws_sha256"] for c in audit["chains"]] == [
        c["draws_sha256"] for c in first_audit["chains"]
    ]
    with app.extensions["drawyard"].sessions() as session:
        from service.store.models import Chain

        def arrays_of(job_id):
            return session.scalar(
                select(func.count())
                .select_from(ChainArray)
                .join(Chain, Chain.id == ChainArray.chain_id)
                .where(Chain.job_id == job_id)
            )

        assert arrays_of(again["id"]) == arrays_of(first["id"]) > 2


def test_reuse_needs_a_given_seed_the_same_settings_and_can_be_switched_off(app, queue):
    client = app.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=8)
    _, first = call(client, "POST", "/v1/jobs", body)
    run_to_the_end(app, first["id"], 2)
    queue.client.delete(queue.name)
    fresh = [
        {**body, "reuse": False},
        normal_mean(chains=2, warmup=100, draws=100, seed=9),
        normal_mean(chains=3, warmup=100, draws=100, seed=8),
        {**body, "checks": {"min_bulk_ess": 10}},
        {**body, "data": {"n": 2, "y": [1.0, 2.0]}},
    ]
    unseeded = copy.deepcopy(body)
    del unseeded["sampler"]["seed"]
    for other in [*fresh, unseeded]:
        response, job = call(client, "POST", "/v1/jobs", other)
        assert response.status_code == 202 and job["state"] == "queued", other
        assert job["reused_from"] is None
    assert queue.length() == 2 + 2 + 3 + 2 + 2 + 2


def test_idempotency_keys_keep_their_meaning_with_reuse(app, queue):
    client = app.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=10)
    _, first = call(client, "POST", "/v1/jobs", body)
    run_to_the_end(app, first["id"], 2)
    key = {"Idempotency-Key": "nightly-1"}
    made = client.post("/v1/jobs", json=body, headers=key)
    replay = client.post("/v1/jobs", json=body, headers=key)
    assert made.status_code == 202 and replay.status_code == 200
    assert made.get_json()["id"] == replay.get_json()["id"] != first["id"]
    assert made.get_json()["reused_from"] == first["id"]


def test_warm_start_checks_and_fills_in_the_earlier_chains_adapted_state(app, queue):
    client = app.test_client()
    register(client, "demand", SPEC)
    _, earlier = call(client, "POST", "/v1/jobs", by_ref("demand", 1, chains=2, warmup=100,
                                                       draws=100, seed=11))
    _, pending = call(client, "POST", "/v1/jobs", normal_mean(seed=12))
    _, stepping = call(client, "POST", "/v1/jobs", normal_mean(method="metropolis", seed=13))
    run_to_the_end(app, earlier["id"], 2)
    queue.client.delete(queue.name)
    with app.extensions["drawyard"].sessions() as session:
        from service.store.models import Chain

        adapted = session.scalars(
            select(Chain.adapted).where(Chain.job_id == earlier["id"]).order_by(Chain.chain_index)
        ).all()
    assert all("step_size" in record for record in adapted)
    # Another version of the same registered model with the same unknowns may start from it.
    changed = copy.deepcopy(SPEC)
    changed["priors"][0]["arguments"]["scale"] = 5
    register(client, "demand", changed)
    warm = {**by_ref("demand", 2, seed=14), "warm_start": {"job": earlier["id"]}}
    response, job = call(client, "POST", "/v1/jobs", warm)
    assert response.status_code == 202 and job["warm_start_from"] == earlier["id"]
    _, audit = call(client, "GET", f"/v1/jobs/{job['id']}/audit")
    assert audit["warm_start_from"] == earlier["id"]
    with app.extensions["drawyard"].sessions() as session:
        stored = session.scalar(select(Job.body).where(Job.id == job["id"]))
    assert stored["warm_start"] == {"job": earlier["id"], "chains": list(adapted)}
    inline = {**normal_mean(seed=15), "warm_start": {"job": earlier["id"]}}
    del inline["sampler"]["warmup_iterations"]
    response, job = call(client, "POST", "/v1/jobs", inline)  # the same spec hash
    assert response.status_code == 202
    # Without a warm-up length of its own a warm start gets the shorter default, recorded.
    _, audit = call(client, "GET", f"/v1/jobs/{job['id']}/audit")
    assert audit["settings"]["warmup_iterations"] == DEFAULT_WARM_WARMUP < 1000
    assert all(c["iterations_total"] == DEFAULT_WARM_WARMUP + 300 for c in job["chains"])
    other_model = copy.deepcopy(SPEC)
    other_model["unknowns"]["mu"] = {"lower": -100}
    refusals = [
        ({**normal_mean(), "model": other_model, "warm_start": {"job": earlier["id"]}},
         "ran another model"),
        ({**normal_mean(), "warm_start": {"job": pending["id"]}}, "is queued"),
        ({**normal_mean(), "warm_start": {"job": stepping["id"]}}, "is queued"),
        ({**normal_mean(method="metropolis"), "warm_start": {"job": earlier["id"]}},
         "cannot start from"),
    ]  # fmt: skip
    counts = row_counts(app)
    for body, words in refusals:
        response, problem = call(client, "POST", "/v1/jobs", body)
        assert response.status_code == 422
        assert problem["errors"][0]["pointer"] == "/warm_start/job"
        assert words in problem["errors"][0]["message"], problem
    assert row_counts(app) == counts and queue.length() == 2 + 2
    # Records that do not fit the new job (here a position of the wrong length) are the
    # engine's to find; the service reports them against the job the submission named.
    with app.extensions["drawyard"].sessions() as session, session.begin():
        from service.store.models import Chain

        chain = session.scalars(
            select(Chain).where(Chain.job_id == earlier["id"], Chain.chain_index == 0)
        ).one()
        chain.adapted = {**chain.adapted, "position": [0.0, 1.0, 2.0]}
    response, problem = call(client, "POST", "/v1/jobs", inline)
    assert response.status_code == 422
    assert {e["pointer"] for e in problem["errors"]} == {"/warm_start/job"}
    assert problem["errors"][0]["message"].startswith("The earlier job's chain 1: ")
    assert row_counts(app) == counts
