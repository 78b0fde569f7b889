"""Per-key rate limit and per-tenant cap on jobs in progress, on a real store and a real Redis.

External references: RFC 6585 section 4 (429 Too Many Requests, which may carry Retry-After);
RFC 9110 section 10.2.3 (Retry-After as a number of seconds); RFC 9457 problem documents.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from flask import Flask
from sqlalchemy import func, select

from service.access.keys import create_key
from service.app import create_app
from service.store.models import Job
from tests.service.bodies import normal_mean

PROBLEM = "application/problem+json"


def make_app(database_url: str, redis_url: str, **settings: object) -> Flask:
    return create_app({"database_url": database_url, "broker_url": redis_url, **settings})


@pytest.fixture
def apps(database_url: str, redis_url: str) -> Iterator[list[Flask]]:
    """Two apps on one store and one Redis: two API processes of one deployment."""
    built = [make_app(database_url, redis_url, max_active_jobs=2) for _ in range(2)]
    yield built
    for app in built:
        app.extensions["drawyard"].close()


@pytest.fixture
def rate_limited_apps(database_url: str, redis_url: str) -> Iterator[list[Flask]]:
    built = [make_app(database_url, redis_url, rate_limit=5, rate_window=86_400) for _ in range(2)]
    yield built
    for app in built:
        app.extensions["drawyard"].close()


def bearer(secret: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {secret}"}


def test_rate_limit_is_per_key_and_shared_by_processes(rate_limited_apps):
    apps = rate_limited_apps
    sessions = apps[0].extensions["drawyard"].sessions
    first = create_key(sessions, "alpha", ["read"])
    other = create_key(sessions, "alpha", ["read"])
    clients = [app.test_client() for app in apps]
    # Five requests allowed per window, spread over both processes: the sixth is refused.
    codes = [clients[i % 2].get("/v1/jobs", headers=bearer(first.secret)).status_code
             for i in range(5)]
    assert codes == [200] * 5
    refused = clients[1].get("/v1/jobs", headers=bearer(first.secret))
    assert refused.status_code == 429
    assert refused.mimetype == PROBLEM
    retry_after = int(refused.headers["Retry-After"])
    assert 1 <= retry_after <= 86_400
    assert refused.get_json()["status"] == 429
    # Another key has its own allowance.
    assert clients[0].get("/v1/jobs", headers=bearer(other.secret)).status_code == 200


def test_tenant_cap_on_jobs_in_progress(apps):
    runtime = apps[0].extensions["drawyard"]
    alpha = create_key(runtime.sessions, "alpha", ["submit", "read"])
    beta = create_key(runtime.sessions, "beta", ["submit", "read"])
    client = apps[0].test_client()

    def submit(key, seed: int):
        return client.post("/v1/jobs", json=normal_mean(seed=seed), headers=bearer(key.secret))

    assert [submit(alpha, seed).status_code for seed in (1, 2)] == [202, 202]
    with runtime.sessions() as session:
        before = session.scalar(select(func.count()).select_from(Job))
    refused = submit(alpha, 3)
    assert refused.status_code == 429 and refused.mimetype == PROBLEM
    assert int(refused.headers["Retry-After"]) > 0
    with runtime.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Job)) == before  # nothing stored
    # The cap is per tenant; and cancelling one job frees a place.
    assert submit(beta, 4).status_code == 202
    jobs = client.get("/v1/jobs", headers=bearer(alpha.secret)).get_json()["jobs"]
    cancel = client.post(f"/v1/jobs/{jobs[0]['id']}/cancel", headers=bearer(alpha.secret))
    assert cancel.get_json()["state"] == "cancelled"
    assert submit(alpha, 5).status_code == 202


def test_required_keys_refuse_before_any_key_exists(database_url, redis_url):
    app = make_app(database_url, redis_url, require_keys=1)
    try:
        answer = app.test_client().get("/v1/jobs")
        assert answer.status_code == 401 and answer.mimetype == PROBLEM
        assert app.test_client().get("/v1/openapi.json").status_code == 200
    finally:
        app.extensions["drawyard"].close()


def test_tenants_isolated_on_both_backends(apps):
    """The tenant rule is a WHERE clause; checked on SQLite and PostgreSQL alike."""
    sessions = apps[0].extensions["drawyard"].sessions
    alpha = create_key(sessions, "alpha", ["submit", "read"])
    beta = create_key(sessions, "beta", ["submit", "read"])
    client = apps[0].test_client()
    job_id = client.post("/v1/jobs", json=normal_mean(), headers=bearer(alpha.secret)).get_json()[
        "id"
    ]
    assert client.get(f"/v1/jobs/{job_id}", headers=bearer(alpha.secret)).status_code == 200
    assert client.get(f"/v1/jobs/{job_id}", headers=bearer(beta.secret)).status_code == 404
    # The submitted spec and data are the tenant's too.
    for part in ("", "?part=data"):
        path = f"/v1/jobs/{job_id}/request{part}"
        assert client.get(path, headers=bearer(alpha.secret)).status_code == 200
        assert client.get(path, headers=bearer(beta.secret)).status_code == 404
    assert client.get("/v1/jobs", headers=bearer(beta.secret)).get_json()["jobs"] == []


def test_metrics_need_the_metrics_scope_and_that_scope_reads_nothing_else(apps):
    """Issue 13 item 12 / issue 14: /metrics is behind a scope once keys exist."""
    sessions = apps[0].extensions["drawyard"].sessions
    reader = create_key(sessions, "alpha", ["submit", "read"])
    scraper = create_key(sessions, "monitoring", ["metrics"])
    client = apps[0].test_client()
    refused = client.get("/metrics")
    assert refused.status_code == 401 and refused.mimetype == PROBLEM
    assert refused.headers["WWW-Authenticate"].startswith("Bearer")
    missing = client.get("/metrics", headers=bearer(reader.secret))
    assert missing.status_code == 403 and "'metrics' scope" in missing.get_json()["detail"]
    scraped = client.get("/metrics", headers=bearer(scraper.secret))
    assert scraped.status_code == 200 and "drawyard_jobs" in scraped.get_data(as_text=True)
    assert client.get("/v1/jobs", headers=bearer(scraper.secret)).status_code == 403
