"""Bad input beside a valid warm start: refused with a pointer, nothing stored or queued.

A warm start fills in a shorter warm-up when the sampler settings give none. That must not paper
over settings that are not an object at all: RFC 9457 problem at /sampler (RFC 6901 pointer),
422 (RFC 9110 section 15.5.21), rows and queue unchanged. The earlier job is run in process by
the service's own chain and finishing code on a real SQLite store and Redis broker.
"""

from __future__ import annotations

import pytest
from flask import Flask

from service.warm_start import DEFAULT_WARM_WARMUP
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from tests.service.store_probe import row_counts
from tests.service.test_registry_views import call, run_to_the_end


@pytest.fixture
def earlier(app: Flask, queue) -> str:
    _, job = call(app.test_client(), "POST", "/v1/jobs", normal_mean(warmup=100, draws=100))
    run_to_the_end(app, job["id"], 2)
    queue.client.delete(queue.name)
    return job["id"]


@pytest.mark.parametrize("sampler", [5, None, "nuts", [1], True])
def test_sampler_settings_that_are_not_an_object_are_refused_with_a_warm_start(
    app: Flask, queue, earlier: str, sampler
) -> None:
    body = normal_mean()
    body["sampler"] = sampler
    body["warm_start"] = {"job": earlier}
    before = row_counts(app)
    response = app.test_client().post("/v1/jobs", json=body)
    problem = check_flask("POST", "/v1/jobs", response)
    assert response.status_code == 422, problem
    assert "/sampler" in [e["pointer"] for e in problem["errors"]]
    assert row_counts(app) == before and queue.length() == 0


def test_a_warm_start_without_sampler_settings_gets_the_short_warm_up(
    app: Flask, queue, earlier: str
) -> None:
    body = normal_mean()
    del body["sampler"]
    body["warm_start"] = {"job": earlier}
    client = app.test_client()
    response = client.post("/v1/jobs", json=body)
    assert response.status_code == 202, response.get_json()
    audit = client.get(f"/v1/jobs/{response.get_json()['id']}/audit").get_json()
    assert audit["settings"]["warmup_iterations"] == DEFAULT_WARM_WARMUP


@pytest.mark.parametrize("job", ["0" * 32, "earlier"])
def test_records_sent_by_the_submitter_are_refused_once_not_blamed_on_the_earlier_job(
    app: Flask, queue, earlier: str, job: str
) -> None:
    body = normal_mean()
    body["warm_start"] = {"job": earlier if job == "earlier" else job, "chains": [{}]}
    response = app.test_client().post("/v1/jobs", json=body)
    problem = check_flask("POST", "/v1/jobs", response)
    assert response.status_code == 422
    assert [e["pointer"] for e in problem["errors"]] == ["/warm_start/chains"]
    assert "earlier job's" not in response.get_data(as_text=True)
    assert queue.length() == 0
