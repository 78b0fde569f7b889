"""PSIS-LOO and comparisons over HTTP (Flask's test client on a real SQLite store and Redis).

Jobs are run in process by the service's own chain and finishing code. The reference for the
numbers is exact leave-one-out of the conjugate normal model, by closed-form refits (BDA3, Gelman
et al. 2013, section 2.5: posterior precision 1/s0^2 + n/sigma^2, predictive variance sigma^2
plus the posterior variance); Vehtari, Gelman & Gabry (2017) for PSIS-LOO.
"""

from __future__ import annotations

import copy

import numpy as np
from flask import Flask
from scipy import stats

from tests.service.bodies import NOISE_SCALE, PRIOR_LOCATION, PRIOR_SCALE, Y, normal_mean
from tests.service.store_probe import row_counts
from tests.service.test_registry_views import call, run_to_the_end


def with_pointwise(body: dict) -> dict:
    body = copy.deepcopy(body)
    body["model"]["per_draw"] = {"pointwise": ["obs"]}
    return body


def exact_loo(y: np.ndarray, prior_scale: float = PRIOR_SCALE) -> np.ndarray:
    out = np.empty(y.size)
    for i in range(y.size):
        rest = np.delete(y, i)
        precision = 1 / prior_scale ** 2 + rest.size / NOISE_SCALE ** 2
        mean = (PRIOR_LOCATION / prior_scale ** 2 + rest.sum() / NOISE_SCALE ** 2) / precision
        out[i] = stats.norm.logpdf(y[i], mean, np.sqrt(NOISE_SCALE ** 2 + 1 / precision))
    return out


def finished(app: Flask, body: dict) -> str:
    _, job = call(app.test_client(), "POST", "/v1/jobs", body)
    run_to_the_end(app, job["id"], body["sampler"]["chains"])
    return job["id"]


def test_predictive_accuracy_matches_exact_leave_one_out(app: Flask, queue) -> None:
    """elpd_loo of a 4 x 500 job within its stated standard error of the exact value, and within
    0.1 (Monte Carlo error of 2000 correlated draws, k-hat below 0.5 for this well-behaved
    model)."""
    job = finished(app, with_pointwise(normal_mean(chains=4, warmup=300, draws=500, seed=3)))
    waiting = queue.length()
    response, document = call(app.test_client(), "GET", f"/v1/jobs/{job}/predictive-accuracy")
    assert response.status_code == 200
    exact = exact_loo(np.array(Y))
    assert abs(document["elpd_loo"] - exact.sum()) < document["elpd_loo_se"]
    assert abs(document["elpd_loo"] - exact.sum()) < 0.1
    assert document["observations"] == len(Y) and document["draws"] == 2000
    assert document["pointwise"]["names"] == [f"pointwise.obs[{i + 1}]" for i in range(len(Y))]
    assert document["flagged"] == []
    assert queue.length() == waiting


def test_a_job_without_pointwise_values_is_a_conflict(app: Flask) -> None:
    job = finished(app, normal_mean(chains=2, warmup=100, draws=100, seed=4))
    response, document = call(app.test_client(), "GET", f"/v1/jobs/{job}/predictive-accuracy")
    assert response.status_code == 409
    assert "per_draw.pointwise" in document["detail"]


def test_comparison_orders_jobs_and_refuses_other_data(app: Flask, queue) -> None:
    """A prior N(0, 10^2) against a badly placed prior N(5, 0.1^2) on the same data: the first
    predicts better. A job on other data is a 422 at its place in the list, and nothing is queued
    or stored by the comparison."""
    good = finished(app, with_pointwise(normal_mean(chains=2, warmup=200, draws=500, seed=5)))
    bad_body = with_pointwise(normal_mean(chains=2, warmup=200, draws=500, seed=6))
    bad_body["model"]["priors"][0]["arguments"] = {"location": 5, "scale": 0.1}
    bad = finished(app, bad_body)
    other_body = with_pointwise(normal_mean(chains=2, warmup=100, draws=100, seed=7))
    other_body["data"]["y"] = [y + 1 for y in Y]
    other = finished(app, other_body)
    client = app.test_client()
    waiting, rows = queue.length(), row_counts(app)
    response, document = call(client, "POST", "/v1/comparisons", {"jobs": [bad, good]})
    assert response.status_code == 200
    assert [r["job"] for r in document["ranked"]] == [good, bad]
    assert document["ranked"][0]["elpd_difference"] == 0
    assert document["ranked"][1]["elpd_difference"] < -2 * document["ranked"][1]["difference_se"]
    response, problem = call(client, "POST", "/v1/comparisons", {"jobs": [good, other]})
    assert response.status_code == 422
    assert problem["errors"][0]["pointer"] == "/jobs/1"
    assert "other data" in problem["errors"][0]["message"]
    response, problem = call(client, "POST", "/v1/comparisons", {"jobs": [good]})
    assert response.status_code == 422 and problem["errors"][0]["pointer"] == "/jobs"
    response, problem = call(client, "POST", "/v1/comparisons",
                             {"jobs": [good, "0" * 32], "extra": 1})
    assert response.status_code == 422
    assert {e["pointer"] for e in problem["errors"]} == {"/extra"}
    assert queue.length() == waiting and row_counts(app) == rows


def test_evidence_of_a_job_and_a_bayes_factor(app: Flask, queue) -> None:
    """The normal mean with known variance (BDA3 section 2.5): marginally
    y ~ N(m0 1, sigma^2 I + s0^2 1 1^T) (scipy.stats.multivariate_normal). The job's bridge
    estimate lies within three of its errors of that; the Bayes factor against the same model
    with prior sd 1 is within three of its error of the closed-form ratio."""
    wide = finished(app, normal_mean(chains=4, warmup=300, draws=500, seed=8))
    narrow_body = normal_mean(chains=4, warmup=300, draws=500, seed=9)
    narrow_body["model"]["priors"][0]["arguments"]["scale"] = 1.0
    narrow = finished(app, narrow_body)
    y = np.array(Y)

    def exact(prior_scale: float) -> float:
        covariance = NOISE_SCALE ** 2 * np.eye(y.size) + prior_scale ** 2
        return stats.multivariate_normal(np.full(y.size, PRIOR_LOCATION), covariance).logpdf(y)

    client = app.test_client()
    waiting, rows = queue.length(), row_counts(app)
    response, document = call(client, "GET", f"/v1/jobs/{wide}/evidence")
    assert response.status_code == 200
    assert abs(document["log_evidence"] - exact(PRIOR_SCALE)) < 3 * document["relative_error"]
    again = call(client, "GET", f"/v1/jobs/{wide}/evidence")[1]
    assert again["log_evidence"] == document["log_evidence"]   # seeded by the job's seed
    response, factor = call(client, "POST", "/v1/bayes-factors", {"jobs": [narrow, wide]})
    assert response.status_code == 200
    expected = exact(1.0) - exact(PRIOR_SCALE)
    assert abs(factor["log_bayes_factor"] - expected) < 3 * factor["error"]
    assert queue.length() == waiting and row_counts(app) == rows


def test_evidence_of_a_job_with_a_flat_prior_is_refused(app: Flask) -> None:
    body = normal_mean(chains=2, warmup=100, draws=100, seed=10)
    body["model"]["priors"] = []
    body["model"]["unknowns"]["mu"] = {"flat_prior": True}
    job = finished(app, body)
    response, problem = call(app.test_client(), "GET", f"/v1/jobs/{job}/evidence")
    assert response.status_code == 422
    assert problem["errors"][0]["pointer"] == "/model/unknowns/mu/flat_prior"
    assert "improper" in problem["errors"][0]["message"]


def test_the_comparison_page_shows_the_ranking_and_the_refusal(app: Flask) -> None:
    """The web page's comparison view (the same numbers as POST /v1/comparisons) and, for jobs on
    other data, the same reason the API gives."""
    good = finished(app, with_pointwise(normal_mean(chains=2, warmup=200, draws=300, seed=11)))
    bad_body = with_pointwise(normal_mean(chains=2, warmup=200, draws=300, seed=12))
    bad_body["model"]["priors"][0]["arguments"] = {"location": 5, "scale": 0.1}
    bad = finished(app, bad_body)
    client = app.test_client()
    listing = client.get("/jobs").get_data(as_text=True)
    assert f'value="{good}"' in listing and "Compare the ticked jobs" in listing
    page = client.get(f"/compare?jobs={bad}&jobs={good}")
    assert page.status_code == 200
    text = page.get_data(as_text=True)
    _, api = call(client, "POST", "/v1/comparisons", {"jobs": [bad, good]})
    assert text.index(good[:12]) < text.index(bad[:12])   # best first, as the API orders them
    assert f"{api['ranked'][1]['elpd_difference']:.2f}" in text
    assert "qualified review" in text
    other_body = with_pointwise(normal_mean(chains=2, warmup=100, draws=100, seed=13))
    other_body["data"]["y"] = [y + 1 for y in Y]
    other = finished(app, other_body)
    refused = client.get(f"/compare?jobs={good}&jobs={other}")
    assert refused.status_code == 422
    assert "other data" in refused.get_data(as_text=True)
