"""Tampered listing cursors of the model registry: 400 problem documents, never a 5xx.

A cursor is opaque (base64url of a prefix and a value); one this service never gave out is a bad
query parameter (RFC 9457 problem naming the parameter). Checked on SQLite and PostgreSQL, whose
drivers refuse different things: PostgreSQL takes no NUL character in a text parameter.
"""

from __future__ import annotations

import base64
from collections.abc import Iterator

import pytest
from flask import Flask

from service.app import create_app
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask


def cursor_of(text: str) -> str:
    return base64.urlsafe_b64encode(text.encode()).decode().rstrip("=")


@pytest.fixture
def registry_app(database_url: str, redis_url: str) -> Iterator[Flask]:
    app = create_app({"database_url": database_url, "broker_url": redis_url, "page_limit": 1})
    yield app
    app.extensions["drawyard"].close()


TAMPERED = [
    # "²".isdigit() is True in Python, but int("²") raises: a digit test must be ASCII-only.
    ("/v1/models/demand/versions", "versions-before:\u00b2"),
    ("/v1/models/demand/versions", "versions-before:\u0663"),  # ARABIC-INDIC DIGIT THREE
    ("/v1/models/demand/versions", "versions-before:"),
    ("/v1/models", "models-after:\x00"),
    ("/v1/models", "models-after:demand\x00"),
    ("/v1/models", "models-after:" + "z" * 65),
    ("/v1/models", "versions-before:1"),
]


@pytest.mark.parametrize(("path", "text"), TAMPERED)
def test_a_tampered_cursor_is_a_400_naming_the_cursor(
    registry_app: Flask, path: str, text: str
) -> None:
    client = registry_app.test_client()
    for scale in (1, 2):
        spec = normal_mean()["model"]
        spec["priors"][0]["arguments"]["scale"] = scale
        assert client.post("/v1/models/demand/versions", json={"model": spec}).status_code == 201
    url = f"{path}?cursor={cursor_of(text)}"
    response = client.get(url)
    problem = check_flask("GET", url, response)
    assert response.status_code == 400, problem
    assert problem["errors"][0]["parameter"] == "cursor"


def test_the_cursors_the_service_gives_out_still_page_through(registry_app: Flask) -> None:
    client = registry_app.test_client()
    for name in ("alpha", "beta"):
        client.post(f"/v1/models/{name}/versions", json={"model": normal_mean()["model"]})
    first = client.get("/v1/models").get_json()
    second = client.get(f"/v1/models?cursor={first['next_cursor']}").get_json()
    assert [m["name"] for m in first["models"] + second["models"]] == ["alpha", "beta"]
    assert second["next_cursor"] is None
