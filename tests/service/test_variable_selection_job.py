"""A variable-selection job end to end with real parts: gunicorn, a Celery worker, Redis and a
SQLite store from the harness, then the summary, the draws, the job page and its bar chart over
HTTP, the Python client and the `drawyard probabilities` command.

The model is the spike-and-slab pattern of docs/discrete-unknowns.md (George & McCulloch 1993:
one Bernoulli inclusion indicator per covariate choosing between a narrow and a wide normal
prior for its slope), on a small regression invented here from a seeded generator: n = 30 rows,
p = 3 covariates, one strong effect (1.5, against a noise sd of 1) and two that are zero.

The statistical checks are sanity bounds only, not a reference check: the strong covariate's
inclusion probability above 0.9 and a null one's below it. The reference check of inclusion
probabilities, against exact enumeration of all 2^p models under Zellner's g-prior (Liang et al.
2008), is tests/samplers/test_variable_selection.py. Why the bounds hold by a wide margin here
(derived for this data, not measured): the strong slope's least-squares estimate is about 1.5
with a standard error of about 1/sqrt(30) = 0.18, some 75 spike widths (0.02) from zero, so its
indicator's full conditional puts mass of order exp(-2800) on 0 once warm-up is over; a null
covariate's estimate is within a few standard errors of zero, where the marginal likelihood
ratio of slab to spike, sqrt((0.02^2 + 1/30) / (2^2 + 1/30)) ~ 0.09 at an estimate of 0, makes
exclusion the more probable answer. The remaining checks are of the documents themselves (the
shares of the pattern table and its `other` make 1; integers stay integers; the CLI prints the
tables the client reads).
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pytest
import requests

from service.client import DrawyardClient
from service.discrete_tables import discrete_text
from service.job_commands import EXIT_PASSED
from tests.client.test_client_cli import drawyard
from tests.service.test_live_service import call, finished, submit

ROWS, COVARIATES = 30, 3
INDICATORS = [f"included[{j}]" for j in range(1, COVARIATES + 1)]  # 1-based flat names


def regression() -> tuple[np.ndarray, np.ndarray]:
    """Invented test input: standard normal covariates, y = 1 + 1.5 x1 + N(0, 1) noise."""
    rng = np.random.default_rng(1993)
    X = rng.normal(size=(ROWS, COVARIATES))
    y = 1.0 + X @ np.array([1.5, 0.0, 0.0]) + rng.normal(size=ROWS)
    return X, y


def selection_body() -> dict:
    """The unknowns and priors exactly as docs/discrete-unknowns.md writes the pattern, completed
    with the inputs and the likelihood of a linear regression (flat intercept and log sd)."""
    X, y = regression()
    return {
        "model": {
            "inputs": {"rows": {"type": "integer"}, "covariates": {"type": "integer"},
                       "X": {"type": "real", "shape": ["rows", "covariates"]},
                       "y": {"type": "real", "shape": ["rows"]}},
            "unknowns": {
                "slope": {"shape": ["covariates"]},
                "included": {"type": "integer", "shape": ["covariates"], "lower": 0, "upper": 1},
                "intercept": {"flat_prior": True},
                "log_sigma": {"flat_prior": True},
            },
            "priors": [
                {"on": "included", "distribution": "bernoulli", "arguments": {"probability": 0.5}},
                {"on": "slope", "distribution": "normal",
                 "arguments": {"location": 0, "scale": "select(included == 1, 2.0, 0.02)"}},
            ],
            "likelihood": [{"name": "y", "observed": "y", "distribution": "normal",
                            "arguments": {"location": "intercept + X @ slope",
                                          "scale": "exp(log_sigma)"}}],
        },
        "data": {"rows": ROWS, "covariates": COVARIATES, "X": X.tolist(), "y": y.tolist()},
        "sampler": {"chains": 2, "warmup_iterations": 300, "draws": 300, "seed": 1993},
        "summary": {"patterns": ["included"]},
    }  # fmt: skip


@pytest.mark.slow
def test_a_variable_selection_job_over_http_page_client_and_cli(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    service = live_service(sqlite_store, redis_url, workers=1)
    job_url = submit(service.base_url, selection_body())
    job_id = job_url.rsplit("/", 1)[1]
    finished(job_url, service, timeout=300)  # asserts the job succeeded

    # the summary: each indicator's probability of one (sanity bounds, see the docstring)
    _, summary = call("GET", job_url + "/summary")
    records = {q["name"]: q for q in summary["quantities"]}
    inclusion = {}
    for name in INDICATORS:
        table = records[name]["discrete"]
        assert table is not None and table["probability_of_one"] is not None, records[name]
        inclusion[name] = table["probability_of_one"]["probability"]
    assert inclusion["included[1]"] > 0.9, inclusion
    assert inclusion["included[2]"] < inclusion["included[1]"], inclusion

    # the joint-pattern table: the models, most probable first, listed shares plus other make 1
    [patterns] = summary["patterns"]
    assert patterns["name"] == "included" and patterns["elements"] == INDICATORS
    assert patterns["binary"] is True
    shares = [row["probability"] for row in patterns["patterns"]]
    assert shares == sorted(shares, reverse=True)
    other = patterns["other"]["probability"] if patterns["other"] else 0.0
    assert sum(shares) <= 1 + 1e-12 and sum(shares) + other == pytest.approx(1, abs=1e-12)
    assert "included[1]" in patterns["patterns"][0]["included"]
    by_element = {item["name"]: item["probability"] for item in patterns["inclusion"]}
    assert by_element == pytest.approx(inclusion, abs=1e-12)

    # the draws: the indicator columns as integers, in JSON and in CSV
    _, draws = call("GET", job_url + "/draws")
    names = draws["quantities"]
    columns = [names.index(name) for name in INDICATORS]
    cells = [row[i] for chain in draws["chains"] for row in chain["draws"] for i in columns]
    assert len(cells) == 2 * 300 * COVARIATES
    assert all(type(c) is int and c in (0, 1) for c in cells)
    response = requests.get(job_url + "/draws", params={"format": "csv"}, timeout=60)
    assert response.status_code == 200
    rows = list(csv.reader(io.StringIO(response.text)))
    positions = [rows[0].index(name) for name in INDICATORS]
    assert all(row[i] in ("0", "1") for row in rows[1:] for i in positions)

    # the job page (the live server, not a test client) with the indicator's bar chart
    page = requests.get(f"{service.base_url}/jobs/{job_id}",
                        params={"quantity": "included[2]"}, timeout=60)
    assert page.status_code == 200 and 'data-plot="probabilities"' in page.text
    assert 'data-patterns="included"' in page.text and 'data-inclusion="included"' in page.text
    for suffix, content_type in (("svg", "image/svg+xml"), ("png", "image/png")):
        image = requests.get(f"{service.base_url}/jobs/{job_id}/plots/probabilities.{suffix}",
                             params={"quantity": "included[2]"}, timeout=120)
        assert image.status_code == 200, image.text
        assert image.headers["Content-Type"].split(";")[0] == content_type
        assert image.content.startswith(b"\x89PNG" if suffix == "png" else b"<")

    # the Python client reads the same summary; the CLI prints its tables
    with DrawyardClient(service.base_url) as client:
        document = client.summary(job_id)
    assert document["patterns"] == summary["patterns"]
    printed = drawyard("probabilities", job_id, url=service.base_url)
    assert printed.returncode == EXIT_PASSED, printed.stderr
    assert printed.stdout == discrete_text(dict(document))
    assert "joint patterns of included" in printed.stdout
    assert "included[1]: P(= 1) = " in printed.stdout


def test_the_body_is_the_documented_pattern() -> None:
    """The unknowns and priors submitted are the JSON block of docs/discrete-unknowns.md, so the
    job above tests the pattern users copy (the block is read from the page itself)."""
    text = (Path(__file__).resolve().parents[2] / "docs" / "discrete-unknowns.md").read_text()
    block = text.split("George & McCulloch (1993)", 1)[1].split("```json", 1)[1].split("```")[0]
    documented = json.loads("{" + block + "}")
    model = selection_body()["model"]
    assert {k: model["unknowns"][k] for k in documented["unknowns"]} == documented["unknowns"]
    assert model["priors"] == documented["priors"]
