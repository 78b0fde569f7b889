"""A succeeded job in a real store (SQLite) with a real Redis broker, for the download tests.

The chains and the finishing step run in this process through the same functions the Celery tasks
call (service.chain_work.run_chain, service.finishing.finish), so the stored arrays are the ones a
worker would store; the end-to-end test over HTTP with real workers is in test_live_downloads.py.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from flask import Flask

from service.app import create_app
from service.chain_work import run_chain
from service.finishing import finish
from service.store import migrate
from tests.service.bodies import normal_mean


def two_quantity_body() -> dict:
    """The service tests' normal mean plus a derived quantity and generated replicates, so the
    wide layout has several columns (the model is the one of tests/service/bodies.py)."""
    body = normal_mean(chains=3, warmup=150, draws=120, seed=61)
    body["model"]["derived"] = {"mu_twice": "2 * mu"}
    body["model"]["per_draw"] = {"replicates": ["obs"]}
    return body


@pytest.fixture
def finished(tmp_path: Path, redis_url: str) -> Iterator[tuple[Flask, str]]:
    url = f"sqlite:///{(tmp_path / 'formats.sqlite').resolve()}"
    migrate(url)
    app = create_app({"database_url": url, "broker_url": redis_url})
    client = app.test_client()
    response = client.post("/v1/jobs", json=two_quantity_body())
    assert response.status_code == 202, response.get_data(as_text=True)
    job_id = response.get_json()["id"]
    runtime = app.extensions["drawyard"]
    for index in range(3):
        assert run_chain(runtime, job_id, index).status
    finish(runtime, job_id)
    assert client.get(f"/v1/jobs/{job_id}").get_json()["state"] == "succeeded"
    yield app, job_id
    runtime.close()
