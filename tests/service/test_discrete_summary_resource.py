"""The summary resource serves the discrete tables: each integer-valued quantity's value
probabilities (probability of one for 0/1 quantities) and the joint-pattern tables the
submission's summary.patterns asked for, valid against schemas/summary.json, equal to what the
engine computes from the job's own stored draws, and carried into the client's CLI text.

The model is a beta-binomial of our own (invented counts) with one Bernoulli prediction per
group, `picked[j] ~ Bernoulli(p[j])`: a binary vector whose elements are independent given p. The
chains run in this process through the functions the Celery tasks call (as in
tests/formats/test_column_types.py); the checks are exact recomputations, not statistical ones.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from flask import Flask

from service.app import create_app
from service.chain_work import run_chain
from service.discrete_tables import discrete_text
from service.finishing import finish
from service.store import migrate
from tests.service.response_contract import check_flask
from worker.diagnostics.discrete import pattern_table, value_tables

HITS, TRIALS = [8, 5, 1], [10, 10, 10]
BODY = {
    "model": {
        "inputs": {"k": {"type": "integer"},
                   "trials": {"type": "integer", "shape": ["k"]},
                   "hits": {"type": "integer", "shape": ["k"]}},
        "unknowns": {"p": {"shape": ["k"], "lower": 0, "upper": 1}},
        "priors": [{"on": "p", "distribution": "beta", "arguments": {"a": 1, "b": 1}}],
        "likelihood": [{"name": "hits", "observed": "hits", "distribution": "binomial",
                        "arguments": {"trials": "trials", "probability": "p"}}],
        "per_draw": {"predictions": [{"name": "picked", "distribution": "bernoulli",
                                      "arguments": {"probability": "p"}}],
                     "replicates": ["hits"]},
    },
    "data": {"k": 3, "trials": TRIALS, "hits": HITS},
    "sampler": {"chains": 2, "warmup_iterations": 150, "draws": 200, "seed": 11},
    "summary": {"patterns": ["picked"]},
}  # fmt: skip


@pytest.fixture(scope="module")
def finished(tmp_path_factory: pytest.TempPathFactory, redis_server) -> Iterator[tuple]:
    folder: Path = tmp_path_factory.mktemp("discrete")
    url = f"sqlite:///{(folder / 'discrete.sqlite').resolve()}"
    migrate(url)
    app: Flask = create_app({"database_url": url, "broker_url": redis_server.url})
    client = app.test_client()
    response = client.post("/v1/jobs", json=BODY)
    assert response.status_code == 202, response.get_data(as_text=True)
    job_id = response.get_json()["id"]
    runtime = app.extensions["drawyard"]
    for index in range(2):
        assert run_chain(runtime, job_id, index).status
    assert finish(runtime, job_id) == "succeeded"
    yield client, job_id
    runtime.close()


def _stored_draws(client, job_id: str) -> tuple[np.ndarray, list[str]]:
    response = client.get(f"/v1/jobs/{job_id}/draws?format=csv")
    assert response.status_code == 200
    lines = response.get_data(as_text=True).splitlines()
    header = lines[0].split(",")
    rows = np.array([[float(v) for v in line.split(",")] for line in lines[1:]])
    names = header[2:]  # after the chain and draw columns
    chains = sorted(set(rows[:, 0]))
    draws = np.stack([rows[rows[:, 0] == c][:, 2:] for c in chains])
    return draws, names


def test_the_summary_serves_value_and_pattern_tables(finished) -> None:
    client, job_id = finished
    path = f"/v1/jobs/{job_id}/summary"
    document = check_flask("GET", path, client.get(path))
    records = {r["name"]: r for r in document["quantities"]}
    assert all(records[f"p[{j}]"]["discrete"] is None for j in (1, 2, 3))
    draws, names = _stored_draws(client, job_id)
    integers = {n for n in names if n.startswith(("picked", "replicate."))}
    expected = value_tables(draws, names, integers)
    assert set(expected) == integers
    for name in integers:
        assert json.dumps(records[name]["discrete"]) == json.dumps(expected[name]), name
    assert records["picked[1]"]["discrete"]["probability_of_one"] is not None
    assert records["replicate.hits[1]"]["discrete"]["probability_of_one"] is None
    (table,) = document["patterns"]
    assert json.dumps(table) == json.dumps(pattern_table(draws, "picked", names))
    assert table["binary"] and table["distinct_patterns"] <= 8


def test_the_command_line_text_shows_every_table(finished) -> None:
    client, job_id = finished
    document = client.get(f"/v1/jobs/{job_id}/summary").get_json()
    text = discrete_text(document)
    records = {r["name"]: r for r in document["quantities"]}
    one = records["picked[1]"]["discrete"]["probability_of_one"]
    assert f"picked[1]: P(= 1) = {one['probability']:.4f} ± {one['error']:.4f}" in text
    assert "replicate.hits[1]: " in text and "joint patterns of picked" in text
    assert "inclusion probabilities of picked:" in text


def test_jobs_without_integer_quantities_have_no_tables() -> None:
    assert discrete_text({"quantities": [{"name": "mu", "discrete": None}], "patterns": []}) == (
        "this job has no integer-valued quantities\n"
    )
