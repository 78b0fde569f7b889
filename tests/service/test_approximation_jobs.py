"""Laplace and grid jobs through the service (Flask's test client, a real SQLite store and Redis;
the job's one task run in process by the service's own chain and finishing code).

Reference: the normal mean with known variance (BDA3, Gelman et al. 2013, section 2.5).
"""

from __future__ import annotations

import json
import re

import numpy as np
from flask import Flask

from tests.service.bodies import NOISE_SCALE, PRIOR_SCALE, Y, normal_mean
from tests.service.store_probe import row_counts
from tests.service.test_registry_views import call, run_to_the_end


def approximation(method: str) -> dict:
    body = normal_mean(seed=21)
    body["sampler"] = {"method": method, "draws": 2000, "seed": 21}
    return body


def test_laplace_and_grid_jobs_are_stored_and_audited_like_chains(app: Flask, queue) -> None:
    client = app.test_client()
    precision = 1 / PRIOR_SCALE ** 2 + len(Y) / NOISE_SCALE ** 2
    mean = sum(Y) / NOISE_SCALE ** 2 / precision
    for method in ("laplace", "grid"):
        waiting = queue.length()
        response, job = call(client, "POST", "/v1/jobs", approximation(method))
        assert response.status_code == 202
        assert len(job["chains"]) == 1 and queue.length() == waiting + 1
        run_to_the_end(app, job["id"], 1)
        _, done = call(client, "GET", f"/v1/jobs/{job['id']}")
        assert done["state"] == "succeeded" and done["verdict"]["passed"]
        _, summary = call(client, "GET", f"/v1/jobs/{job['id']}/summary")
        mu = next(q for q in summary["quantities"] if q["name"] == "mu")
        # 2000 independent draws: within 4 Monte Carlo standard errors of the closed form
        assert abs(mu["mean"] - mean) < 4 * np.sqrt(1 / precision / 2000)
        _, stats = call(client, "GET", f"/v1/jobs/{job['id']}/sampler-stats")
        assert "log_weight" in stats["statistics"]
        _, audit = call(client, "GET", f"/v1/jobs/{job['id']}/audit")
        assert audit["settings"]["method"] == method
        assert audit["settings"]["warmup_iterations"] == 0
        assert audit["chains"][0]["draws_shape"] == [2000, 1]


def test_a_grid_job_with_three_unknowns_is_a_422_and_nothing_is_queued(app: Flask, queue) -> None:
    body = approximation("grid")
    body["model"]["unknowns"] = {"mu": {}, "b": {}, "c": {}}
    body["model"]["priors"] += [
        {"on": k, "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
        for k in ("b", "c")
    ]
    waiting, rows = queue.length(), row_counts(app)
    response, problem = call(app.test_client(), "POST", "/v1/jobs", body)
    assert response.status_code == 422
    assert problem["errors"][0]["pointer"] == "/sampler/method"
    assert "at most 2 unconstrained coordinates" in problem["errors"][0]["message"]
    assert queue.length() == waiting and row_counts(app) == rows


def test_draws_of_an_untrustworthy_laplace_job_are_not_used_as_posterior_draws(
    app: Flask,
) -> None:
    """Counts (0, 0, 0) under an exponential(1) prior: the gamma(1, 4) posterior of the rate
    (BDA3 section 2.6) is too skewed for the Gaussian (tests/approximation/test_laplace.py), so
    PSIS-LOO (409) and bridge sampling (422) refuse its draws."""
    body = {
        "model": {
            "inputs": {"n": {"type": "integer"},
                       "y": {"type": "integer", "shape": ["n"], "lower": 0}},
            "unknowns": {"rate": {"lower": 0}},
            "priors": [{"on": "rate", "distribution": "exponential", "arguments": {"rate": 1}}],
            "likelihood": [{"name": "obs", "observed": "y", "distribution": "poisson",
                            "arguments": {"rate": "rate"}}],
            "per_draw": {"pointwise": ["obs"]},
        },
        "data": {"n": 3, "y": [0, 0, 0]},
        "sampler": {"method": "laplace", "draws": 5000, "seed": 2},
    }
    client = app.test_client()
    response, job = call(client, "POST", "/v1/jobs", body)
    assert response.status_code == 202, job
    run_to_the_end(app, job["id"], 1)
    _, done = call(client, "GET", f"/v1/jobs/{job['id']}")
    assert not done["verdict"]["passed"]
    response, problem = call(client, "GET", f"/v1/jobs/{job['id']}/predictive-accuracy")
    assert response.status_code == 409 and "not posterior draws" in problem["detail"]
    response, problem = call(client, "GET", f"/v1/jobs/{job['id']}/evidence")
    assert response.status_code == 422 and problem["errors"][0]["pointer"] == "/sampler/method"


def test_the_submit_page_offers_the_approximations_and_runs_one(app: Flask, queue) -> None:
    """The web form sends the same body the API checks: a grid job from the page is accepted with
    one chain and no warm-up."""
    client = app.test_client()
    page = client.get("/submit").get_data(as_text=True)
    assert 'value="laplace"' in page and 'value="grid"' in page
    body = approximation("grid")
    form = {"model_text": json.dumps(body["model"]), "data_text": json.dumps(body["data"]),
            "method": "grid", "draws": "500", "seed": "4"}
    # the form's CSRF field, as the page rendered it
    form["csrf"] = re.search(r'name="csrf" value="([^"]+)"', page).group(1)
    waiting = queue.length()
    response = client.post("/submit", data=form)
    assert response.status_code == 303
    job = client.get(response.headers["Location"].replace("/jobs/", "/v1/jobs/")).get_json()
    assert len(job["chains"]) == 1 and job["chains"][0]["iterations_total"] == 500
    assert queue.length() == waiting + 1
