"""A NUL character in a label or a label filter: a 4xx naming the field, never a 500.

PostgreSQL refuses NUL (U+0000) in a text value (PostgreSQL 15 documentation, section 8.3,
"Character Types": "the character with code zero ... cannot be stored"), so a label holding one
made the submission's INSERT fail with a 500 there, and a filter holding one made the listing's
SELECT fail. Checked on SQLite and PostgreSQL, with a real Redis broker; nothing stored or queued.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest
import redis
from flask import Flask

from service.app import create_app
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from tests.service.store_probe import row_counts


@pytest.fixture
def any_store_app(database_url: str, redis_url: str) -> Iterator[Flask]:
    app = create_app({"database_url": database_url, "broker_url": redis_url})
    yield app
    app.extensions["drawyard"].close()


def test_a_label_value_with_a_nul_is_a_422_at_that_label(
    any_store_app: Flask, redis_url: str
) -> None:
    broker = redis.Redis.from_url(redis_url)
    queue = any_store_app.extensions["drawyard"].settings.queue
    before = (row_counts(any_store_app), broker.llen(queue))
    body = normal_mean()
    body["labels"] = {"suite": "service", "run": "a\u0000b"}
    response = any_store_app.test_client().post("/v1/jobs", json=body)
    problem = check_flask("POST", "/v1/jobs", response)
    assert response.status_code == 422, problem
    assert [e["pointer"] for e in problem["errors"]] == ["/labels/run"]
    assert (row_counts(any_store_app), broker.llen(queue)) == before


@pytest.mark.parametrize("query", ["label=run:%00", "label=r%00n:x"])
def test_a_label_filter_with_a_nul_is_a_400(any_store_app: Flask, query: str) -> None:
    path = f"/v1/jobs?{query}"
    response = any_store_app.test_client().get(path)
    problem = check_flask("GET", path, response)
    assert response.status_code == 400, problem
    assert problem["errors"][0]["parameter"] == "label"
    page = any_store_app.test_client().get(f"/jobs?{query}")
    assert page.status_code < 500
