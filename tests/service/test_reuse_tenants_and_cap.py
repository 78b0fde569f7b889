"""Reuse keeps tenant isolation and the job cap's meaning (docs/registry.md, "Result reuse";
docs/access.md, "Limits").

Another tenant's identical, seeded submission runs afresh (a result is never copied across
tenants); a job that failed, was cancelled or timed out (its final state written into the store
for the test) is never a source; a tenant at
DRAWYARD_MAX_ACTIVE_JOBS may still get a reused result (it occupies no worker) but not a new run
(429 with Retry-After, RFC 6585 section 4). Keys are made by the real CLI; jobs run in process by
the service's own chain and finishing code on a real SQLite store and Redis broker.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest
import redis
from flask import Flask
from sqlalchemy import update

from service.app import create_app
from service.store.models import Job
from tests.security.access_helpers import create_key
from tests.service.bodies import normal_mean
from tests.service.test_registry_views import run_to_the_end


@pytest.fixture
def capped(sqlite_store: str, redis_url: str) -> Iterator[Flask]:
    app = create_app({"database_url": sqlite_store, "broker_url": redis_url, "max_active_jobs": 1})
    yield app
    app.extensions["drawyard"].close()
    redis.Redis.from_url(redis_url).delete(app.extensions["drawyard"].settings.queue)


def test_reuse_stays_within_the_tenant_and_a_capped_tenant_still_gets_a_reuse(
    capped: Flask, sqlite_store: str
) -> None:
    north = create_key(sqlite_store, "north").headers
    south = create_key(sqlite_store, "south").headers
    client = capped.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=51)
    first = client.post("/v1/jobs", json=body, headers=north).get_json()
    run_to_the_end(capped, first["id"], 2)

    theirs = client.post("/v1/jobs", json=body, headers=south)
    assert theirs.status_code == 202
    assert theirs.get_json()["reused_from"] is None and theirs.get_json()["state"] == "queued"

    # North now has one job queued, its cap.
    other = client.post("/v1/jobs", json=normal_mean(seed=52), headers=north)
    assert other.status_code == 202 and other.get_json()["state"] == "queued"
    reused = client.post("/v1/jobs", json=body, headers=north)
    assert reused.status_code == 202 and reused.get_json()["reused_from"] == first["id"]
    refused = client.post("/v1/jobs", json=normal_mean(seed=53), headers=north)
    assert refused.status_code == 429 and refused.headers["Retry-After"]


@pytest.mark.parametrize("state", ["failed", "cancelled", "timed_out"])
def test_a_job_that_did_not_succeed_is_never_a_source(app: Flask, queue, state: str) -> None:
    client = app.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=54)
    first = client.post("/v1/jobs", json=body).get_json()
    run_to_the_end(app, first["id"], 2)
    with app.extensions["drawyard"].sessions.begin() as session:
        session.execute(update(Job).where(Job.id == first["id"]).values(state=state))
    again = client.post("/v1/jobs", json=body).get_json()
    assert again["reused_from"] is None and again["state"] == "queued"
