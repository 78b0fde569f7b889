"""Model names: exactly the documented rule (docs/registry.md, "Registering models"), nothing
appended.

A name is 1 to 64 letters, digits, '_', '.' or '-', starting with a letter or digit. Python's
``re.match`` with a ``$`` anchor also accepts a trailing newline ("demand\\n"), which would register
a second, invisible twin of "demand" and put a line break in the Location header.
"""

from __future__ import annotations

import pytest
from flask import Flask

from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from tests.service.test_registry_views import model_rows

SPEC = normal_mean()["model"]


@pytest.mark.parametrize("raw", ["demand%0A", "demand%0D%0A", "%0Ademand", "demand%00"])
def test_a_name_with_a_line_break_or_nul_is_refused_and_nothing_is_registered(
    app: Flask, raw: str
) -> None:
    client = app.test_client()
    path = f"/v1/models/{raw}/versions"
    response = client.post(path, json={"model": SPEC})
    problem = check_flask("POST", path, response)
    assert response.status_code == 400, problem
    assert problem["errors"][0]["parameter"] == "name"
    assert model_rows(app) == 0
    assert client.get(f"/v1/models/{raw}/versions/1").status_code == 404


def test_a_model_ref_with_a_line_break_is_a_422_at_its_name(app: Flask, queue) -> None:
    client = app.test_client()
    assert client.post("/v1/models/demand/versions", json={"model": SPEC}).status_code == 201
    body = normal_mean()
    del body["model"]
    body["model_ref"] = {"name": "demand\n", "version": 1}
    before = queue.length()
    response = client.post("/v1/jobs", json=body)
    problem = check_flask("POST", "/v1/jobs", response)
    assert response.status_code == 422
    assert [e["pointer"] for e in problem["errors"]] == ["/model_ref/name"]
    assert queue.length() == before
