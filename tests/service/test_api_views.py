"""The API's views with Flask's test client, on a real SQLite store and a real Redis broker.

Standards checked: RFC 9457 (problem documents: type, title, status, detail; media type
application/problem+json), RFC 9110 (202 Accepted with Location, 413, 415, 409, 404), the IETF
Idempotency-Key header draft (same key and body: same resource; same key, other body: 409),
RFC 6901 (JSON pointers in the problem entries), OpenAPI 3.1 and JSON Schema 2020-12 (the served
document). No worker runs here, so every job stays queued unless it is cancelled.
"""

from __future__ import annotations

import json
import re

import pytest
from jsonschema import Draft202012Validator

from tests.service.bodies import normal_mean, variant
from tests.service.response_contract import check_flask
from tests.service.store_probe import row_counts


def post(client, body, headers=None, **kwargs):
    response = client.post("/v1/jobs", json=body, headers=headers or {}, **kwargs)
    return response, check_flask("POST", "/v1/jobs", response)


def get(client, path):
    response = client.get(path)
    return response, check_flask("GET", path, response)


def test_submit_stores_the_job_and_queues_one_task_per_chain(app, queue) -> None:
    client = app.test_client()
    response, job = post(client, normal_mean(chains=3))
    assert response.status_code == 202
    assert response.headers["Location"] == f"/v1/jobs/{job['id']}"
    assert job["state"] == "queued" and [c["chain"] for c in job["chains"]] == [1, 2, 3]
    assert all(c["iterations_total"] == 500 for c in job["chains"])
    assert queue.length() == 3
    assert row_counts(app)["jobs"] == 1 and row_counts(app)["chains"] == 3
    shown, again = get(client, response.headers["Location"])
    assert shown.status_code == 200 and again["id"] == job["id"]


def test_a_missing_seed_is_fixed_at_submission_and_recorded(app, queue) -> None:
    client = app.test_client()
    body = normal_mean()
    del body["sampler"]["seed"]
    _, job = post(client, body)
    _, audit = get(client, f"/v1/jobs/{job['id']}/audit")
    assert isinstance(audit["seed"], int) and audit["settings"]["seed"] == audit["seed"]
    # SeedSequence(seed).spawn(k): child i has the root's entropy and spawn key (i,) (numpy docs,
    # numpy.random.SeedSequence.spawn).
    assert [s["spawn_key"] for s in audit["chain_seeds"]] == [[0], [1]]
    assert {s["entropy"] for s in audit["chain_seeds"]} == {audit["seed"]}


INVALID = [
    ("unknown top-level member", lambda b: {**b, "extra": 1}, ["/extra"]),
    ("missing model", lambda b: {k: v for k, v in b.items() if k != "model"}, ["", "/model"]),
    (
        "unknown distribution",
        lambda b: _with(b, ("model", "priors", 0, "distribution"), "nromal"),
        ["/model/priors/0/distribution"],
    ),
    ("data of the wrong kind", lambda b: _with(b, ("data", "y", 2), "x"), ["/data/y"]),
    ("too many chains", lambda b: _with(b, ("sampler", "chains"), 9), ["/sampler/chains"]),
    (
        "warm-up plus draws over the limit",
        lambda b: _with(
            _with(b, ("sampler", "draws"), 3000), ("sampler", "warmup_iterations"), 3000
        ),
        ["/sampler/draws"],
    ),
    ("label that is not a string", lambda b: _with(b, ("labels", "team"), 3), ["/labels/team"]),
    ("unknown threshold", lambda b: {**b, "checks": {"max_rhatt": 1.1}}, ["/checks/max_rhatt"]),
    ("seed out of range", lambda b: _with(b, ("sampler", "seed"), -1), ["/sampler/seed"]),
]


def _with(body, path, value):
    out = json.loads(json.dumps(body))
    node = out
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    return out


@pytest.mark.parametrize("case, change, pointers", INVALID, ids=[c[0] for c in INVALID])
def test_invalid_submissions_get_pointers_and_nothing_is_stored_or_queued(
    app, queue, case, change, pointers
) -> None:
    client = app.test_client()
    response, problem = post(client, change(normal_mean()))
    assert response.status_code == 422, problem
    assert response.mimetype == "application/problem+json"
    assert problem["status"] == 422
    found = {entry["pointer"] for entry in problem["errors"]}
    assert found & set(pointers), f"{case}: pointers {found}, expected one of {pointers}"
    assert all(entry["message"] for entry in problem["errors"])
    assert row_counts(app) == {"jobs": 0, "chains": 0, "events": 0}
    assert queue.length() == 0


def test_every_problem_is_reported_at_once(app, queue) -> None:
    body = _with(_with(normal_mean(), ("sampler", "chains"), 99), ("labels", "team"), 1)
    body["model"]["priors"][0]["distribution"] = "nromal"
    response, problem = post(app.test_client(), body)
    pointers = {e["pointer"] for e in problem["errors"]}
    assert {"/sampler/chains", "/labels/team", "/model/priors/0/distribution"} <= pointers
    assert queue.length() == 0


def test_unknown_distribution_with_empty_arguments_is_named_first(app, queue) -> None:
    """Issue 11 item 6: the problem document names the unknown distribution, listing the valid
    ones, and says nothing about the empty arguments beside it."""
    body = normal_mean()
    body["model"]["priors"][0].update(distribution="nromal", arguments={})
    response, problem = post(app.test_client(), body)
    assert response.status_code == 422
    errors = problem["errors"]
    assert [e["pointer"] for e in errors] == ["/model/priors/0/distribution"]
    assert "unknown distribution 'nromal'" in errors[0]["message"]
    assert "normal" in errors[0]["message"].split("known distributions:")[1]
    assert row_counts(app) == {"jobs": 0, "chains": 0, "events": 0} and queue.length() == 0


def test_prior_on_a_nonlinear_derived_quantity_is_refused_unless_flagged(app, queue) -> None:
    """Issue 11 item 5: a prior on exp(mu) leaves out the Jacobian: 422 at the prior's `on`;
    with jacobian_omitted_on_purpose the same job is accepted."""
    body = normal_mean()
    body["model"]["derived"] = {"level": "exp(mu)"}
    body["model"]["priors"].append({"on": "level", "distribution": "lognormal",
                                    "arguments": {"log_location": 0, "log_scale": 2}})
    response, problem = post(app.test_client(), body)
    assert response.status_code == 422
    assert [e["pointer"] for e in problem["errors"]] == ["/model/priors/1/on"]
    assert "jacobian_omitted_on_purpose" in problem["errors"][0]["message"]
    assert queue.length() == 0
    body["model"]["priors"][1]["jacobian_omitted_on_purpose"] = True
    response, _ = post(app.test_client(), body)
    assert response.status_code == 202


def test_wrong_content_type_bad_json_and_oversized_bodies(app, queue) -> None:
    client = app.test_client()
    cases = [
        (client.post("/v1/jobs", data="{}", content_type="text/plain"), 415),
        (client.post("/v1/jobs", data="{not json", content_type="application/json"), 400),
        (client.post("/v1/jobs", data=b"\xff\xfe", content_type="application/json"), 400),
        (
            client.post(
                "/v1/jobs", data="[" + "1," * 20_000 + "1]", content_type="application/json"
            ),
            413,
        ),
    ]
    for response, status in cases:
        assert response.status_code == status
        problem = check_flask("POST", "/v1/jobs", response)
        assert problem["status"] == status and problem["type"] and problem["title"]
    assert row_counts(app)["jobs"] == 0 and queue.length() == 0


def test_idempotency_key_replays_the_same_job_and_refuses_another_body(app, queue) -> None:
    client = app.test_client()
    body = normal_mean()
    first, job = post(client, body, {"Idempotency-Key": "nightly-2026-12-01"})
    again, replay = post(client, body, {"Idempotency-Key": "nightly-2026-12-01"})
    assert first.status_code == 202 and again.status_code == 200
    assert replay["id"] == job["id"] and again.headers["Location"] == first.headers["Location"]
    assert row_counts(app)["jobs"] == 1 and queue.length() == 2
    other, problem = post(
        client, variant(body, labels={"suite": "other"}), {"Idempotency-Key": "nightly-2026-12-01"}
    )
    assert other.status_code == 409 and job["id"] in problem["detail"]
    assert row_counts(app)["jobs"] == 1 and queue.length() == 2
    # Key order and whitespace do not make a different request: the hash is of canonical JSON.
    reordered = json.dumps(dict(reversed(list(body.items()))), indent=2)
    same = client.post(
        "/v1/jobs",
        data=reordered,
        content_type="application/json",
        headers={"Idempotency-Key": "nightly-2026-12-01"},
    )
    assert check_flask("POST", "/v1/jobs", same)["id"] == job["id"]


def test_list_filters_by_state_and_label_and_pages_with_a_cursor(app, queue) -> None:
    client = app.test_client()
    ids = []
    for i in range(7):
        body = variant(normal_mean(), labels={"team": "a" if i % 2 else "b", "n": str(i)})
        ids.append(post(client, body)[1]["id"])
    cancelled = ids[3]
    client.post(f"/v1/jobs/{cancelled}/cancel")
    seen, cursor = [], None
    while True:
        path = "/v1/jobs" + (f"?cursor={cursor}" if cursor else "")
        _, page = get(client, path)
        assert len(page["jobs"]) <= 3  # page_limit of the fixture
        seen += [j["id"] for j in page["jobs"]]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert seen == ids[::-1]  # newest first, each job once
    _, team_a = get(client, "/v1/jobs?label=team:a&limit=50")
    assert [j["id"] for j in team_a["jobs"]] == [ids[5], ids[3], ids[1]]
    _, both = get(client, "/v1/jobs?label=team:a&label=n:5&limit=50")
    assert [j["id"] for j in both["jobs"]] == [ids[5]]
    _, done = get(client, "/v1/jobs?state=cancelled&limit=50")
    assert [j["id"] for j in done["jobs"]] == [cancelled]
    _, either = get(client, "/v1/jobs?state=cancelled,queued&limit=50")
    assert len(either["jobs"]) == 7
    for bad in (
        "/v1/jobs?state=finished",
        "/v1/jobs?cursor=zzz",
        "/v1/jobs?label=nocolon",
        "/v1/jobs?limit=0",
        "/v1/jobs?limit=x",
    ):
        response, problem = get(client, bad)
        assert response.status_code == 400 and problem["errors"][0]["parameter"]


def test_cancel_of_a_queued_job_ends_it_and_its_chains(app, queue) -> None:
    client = app.test_client()
    _, job = post(client, normal_mean(chains=2))
    response = client.post(f"/v1/jobs/{job['id']}/cancel")
    cancelled = check_flask("POST", f"/v1/jobs/{job['id']}/cancel", response)
    assert cancelled["state"] == "cancelled" and cancelled["cancel_requested"] is True
    assert [c["state"] for c in cancelled["chains"]] == ["cancelled", "cancelled"]
    _, audit = get(client, f"/v1/jobs/{job['id']}/audit")
    kinds = [(e["kind"], e["state"]) for e in audit["events"]]
    assert kinds[0] == ("job_state", "queued") and kinds[-1] == ("job_state", "cancelled")
    assert ("cancel_requested", None) in kinds
    # Cancelling again changes nothing and records nothing more.
    again = check_flask(
        "POST", f"/v1/jobs/{job['id']}/cancel", client.post(f"/v1/jobs/{job['id']}/cancel")
    )
    assert again["state"] == "cancelled"
    assert len(get(client, f"/v1/jobs/{job['id']}/audit")[1]["events"]) == len(kinds)


def test_results_of_an_unfinished_job_are_refused_and_unknown_jobs_are_404(app, queue) -> None:
    client = app.test_client()
    _, job = post(client, normal_mean())
    for part in ("summary", "draws", "sampler-stats", "diagnostics"):
        response, problem = get(client, f"/v1/jobs/{job['id']}/{part}")
        assert response.status_code == 409 and response.headers["Retry-After"]
    for part in ("", "/summary", "/audit"):
        response, problem = get(client, f"/v1/jobs/{'0' * 32}{part}")
        assert response.status_code == 404 and problem["status"] == 404
    response = client.get("/v1/no-such-thing")
    assert response.status_code == 404 and response.mimetype == "application/problem+json"


def test_openapi_document_is_served_and_self_consistent(app) -> None:
    """OpenAPI 3.1 (section 4.8.24: Schema Objects are JSON Schema 2020-12) and RFC 6901."""
    client = app.test_client()
    document = client.get("/v1/openapi.json").get_json()
    assert document["openapi"].startswith("3.1")
    for name, schema in document["components"]["schemas"].items():
        Draft202012Validator.check_schema(schema)
        assert "$id" not in schema, name

    def resolve(ref: str):
        node = document
        for token in ref.removeprefix("#/").split("/"):
            node = node[token.replace("~1", "/").replace("~0", "~")]
        return node

    def walk(node):
        if isinstance(node, dict):
            for key, value in node.items():
                if key == "$ref":
                    assert value.startswith("#/") and resolve(value) is not None, value
                else:
                    walk(value)
        elif isinstance(node, list):
            for item in node:
                walk(item)

    walk(document)
    routes = {
        (method.lower(), re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", rule.rule))
        for rule in app.url_map.iter_rules()
        if rule.rule.startswith(("/v1/", "/metrics"))
        for method in rule.methods - {"HEAD", "OPTIONS"}
    }
    documented = {(m, p) for p, ops in document["paths"].items() for m in ops}
    assert routes == documented


def test_openapi_document_validates_and_declares_access_and_headers(app) -> None:
    """openapi-spec-validator (the OpenAPI Initiative's schema for 3.1, from PyPI) accepts the
    document; the security, headers and parameters it declares are the ones the service uses."""
    from openapi_spec_validator import validate

    from service.access.authentication import needed_scope

    client = app.test_client()
    document = client.get("/v1/openapi.json").get_json()
    validate(document)
    operations = [(path, method, op) for path, ops in document["paths"].items()
                  for method, op in ops.items()]
    ids = [op["operationId"] for _, _, op in operations]
    assert len(ids) == len(set(ids)) == len(operations)
    assert document["servers"] == [{"url": "/"}]
    schemes = document["components"]["securitySchemes"]
    assert schemes["bearerKey"] == {**schemes["bearerKey"], "type": "http", "scheme": "bearer"}
    assert schemes["browserSession"]["in"] == "cookie"
    for path, method, op in operations:
        guarded = path.startswith(("/v1/jobs", "/v1/models", "/metrics"))
        if not guarded:
            assert op["security"] == [], path
            continue
        # The scope each operation declares is the one the access check asks for.
        with app.test_request_context(path, method=method.upper()):
            from flask import request

            assert {"bearerKey": [needed_scope(request)]} in op["security"], (method, path)
        assert op["responses"]["401"]["headers"]["WWW-Authenticate"]["required"]
        assert op["responses"]["429"]["headers"]["Retry-After"]["required"]
        for answer in op["responses"].values():
            assert "X-Request-Id" in answer["headers"]
    submit = document["paths"]["/v1/jobs"]["post"]["responses"]
    assert submit["202"]["headers"]["Location"]["required"]
    assert "Retry-After" in submit["202"]["headers"]
    draws = document["paths"]["/v1/jobs/{job_id}/draws"]["get"]
    assert draws["responses"]["200"]["headers"]["ETag"]["required"]
    assert "If-None-Match" in {p["name"] for p in draws["parameters"]}
    parameters = {p["name"]: p["schema"] for p in draws["parameters"]}
    assert parameters["thin"]["type"] == "integer"
    listing = document["paths"]["/v1/jobs"]["get"]["parameters"]
    assert {p["name"]: p["schema"] for p in listing}["limit"]["type"] == "integer"
    assert "text/plain" in document["paths"]["/metrics"]["get"]["responses"]["200"]["content"]
    # And the answers carry what the document says they always carry.
    made = client.post("/v1/jobs", json=normal_mean())
    assert made.headers["Location"].endswith(made.get_json()["id"])
    assert made.headers["X-Request-Id"]
    given = client.get("/v1/health/live", headers={"X-Request-Id": "caller-chosen.id:1"})
    assert given.headers["X-Request-Id"] == "caller-chosen.id:1"
    odd = client.get("/v1/health/live", headers={"X-Request-Id": "no spaces allowed"})
    assert re.fullmatch(r"[0-9a-f]{32}", odd.headers["X-Request-Id"])


def test_readiness_reflects_the_broker(app, sqlite_store) -> None:
    client = app.test_client()
    response, health = get(client, "/v1/health/ready")
    assert response.status_code == 200 and health["checks"]["broker"]["ok"]
    assert get(client, "/v1/health/live")[0].status_code == 200
    from service.app import create_app

    # A port nothing listens on: 1 is reserved (tcpmux) and closed on this machine.
    unreachable = create_app({"database_url": sqlite_store, "broker_url": "redis://127.0.0.1:1/0"})
    response, health = get(unreachable.test_client(), "/v1/health/ready")
    assert response.status_code == 503 and health["status"] == "unavailable"
    assert health["checks"]["database"]["ok"] and not health["checks"]["broker"]["ok"]


def test_quantity_lists_split_on_commas_outside_brackets() -> None:
    """Flat names index matrices as L[2,1] (DEVELOPERS.md, the model spec), so a comma inside
    brackets belongs to the name."""
    from service.problem_details import ApiProblem
    from service.results import select_columns

    names = ["mu", "L[1,1]", "L[2,1]", "L[2,2]", "pointwise.obs[3]"]
    chains = [type("ChainRow", (), {"chain_index": i, "id": i})() for i in range(3)]
    chosen = select_columns(names, chains, "L[2,1], mu,pointwise.obs[3]", "3,1", "4")
    assert chosen.names == ["L[2,1]", "mu", "pointwise.obs[3]"]
    assert chosen.columns == [2, 0, 4] and chosen.chains == [2, 0] and chosen.thin == 4
    for quantities, chain_list, thin in (
        ("L[3,1]", None, None),
        (None, "4", None),
        (None, "0", None),
        (None, None, "0"),
    ):
        with pytest.raises(ApiProblem) as refused:
            select_columns(names, chains, quantities, chain_list, thin)
        assert refused.value.status == 400


def test_concurrent_retries_with_one_idempotency_key_make_one_job(app, queue) -> None:
    """The unique key in the store settles a race between two first attempts (the draft's
    'concurrent requests' case): both get the same job, and its chains are queued once."""
    import threading

    body = normal_mean(chains=2)
    barrier = threading.Barrier(4)
    answers: list = [None] * 4

    def attempt(i: int) -> None:
        client = app.test_client()
        barrier.wait()
        response = client.post("/v1/jobs", json=body, headers={"Idempotency-Key": "race"})
        answers[i] = (response.status_code, check_flask("POST", "/v1/jobs", response)["id"])

    threads = [threading.Thread(target=attempt, args=(i,)) for i in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=60)
    assert len({job_id for _, job_id in answers}) == 1
    assert sorted(status for status, _ in answers).count(202) == 1
    assert row_counts(app)["jobs"] == 1 and queue.length() == 2


def test_an_unreachable_broker_refuses_the_job_with_503(sqlite_store) -> None:
    from service.app import create_app

    app = create_app({"database_url": sqlite_store, "broker_url": "redis://127.0.0.1:1/0"})
    response, problem = post(app.test_client(), normal_mean())
    assert response.status_code == 503 and response.headers["Retry-After"]
    # The job was stored before the broker refused it; it is marked failed, never left queued.
    _, page = get(app.test_client(), "/v1/jobs")
    assert [job["state"] for job in page["jobs"]] == ["failed"]
    assert "queue was unreachable" in page["jobs"][0]["error"]
    # The broker's own message names its host and port; neither reaches the user.
    for text in (json.dumps(problem), json.dumps(page)):
        assert "127.0.0.1" not in text and "redis" not in text.lower()


def test_draws_in_a_format_the_service_cannot_write_get_406(app, queue) -> None:
    """RFC 9110 section 15.5.7: 406 when no representation matches the request's preferences."""
    client = app.test_client()
    _, job = post(client, normal_mean())
    for path, headers in (
        (f"/v1/jobs/{job['id']}/draws?format=xml", {}),
        (f"/v1/jobs/{job['id']}/sampler-stats", {"Accept": "application/xml"}),
    ):
        response = client.get(path, headers=headers)
        problem = check_flask("GET", path, response)
        assert response.status_code == 406 and problem["status"] == 406
