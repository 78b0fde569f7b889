"""NaN and infinity where the engine's checks do not look: a 422 naming the place, never a 500.

Python's JSON parser takes the bare tokens NaN, Infinity and -Infinity, which JSON (RFC 8259
section 6) has no way to write, so they cannot be hashed as canonical JSON for a version's hash or
a job's fingerprint. A bound of an unknown or an input is such a place. The answer is an RFC 9457
problem whose RFC 6901 pointer names the number; nothing is registered, stored or queued. Real
SQLite store and Redis broker, Flask's test client.
"""

from __future__ import annotations

import json

import pytest
from flask import Flask

from tests.service.bodies import normal_mean
from tests.service.response_contract import check_flask
from tests.service.store_probe import row_counts
from tests.service.test_registry_views import model_rows

PLACES = [
    # (text in the normal-mean spec, its replacement, the pointer of the number)
    ('"unknowns": {"mu": {}}', '"unknowns": {"mu": {"lower": NaN}}', "/model/unknowns/mu/lower"),
    (
        '"type": "real", "shape"',
        '"type": "real", "upper": Infinity, "shape"',
        "/model/inputs/y/upper",
    ),
    (
        '"unknowns": {"mu": {}}',
        '"unknowns": {"mu": {"lower": -Infinity, "upper": NaN}}',
        "/model/unknowns/mu/upper",
    ),
]


def _names(pointer: str, pointers: list[str]) -> bool:
    """Some problem is at the number or at the member that holds it, never at the whole body
    (the engine's own check may speak of the unknown, "lower is above upper")."""
    return any(p and (pointer == p or pointer.startswith(p + "/")) for p in pointers)


def _with(document: dict, old: str, new: str) -> bytes:
    text = json.dumps(document)
    assert old in text
    return text.replace(old, new, 1).encode()


@pytest.mark.parametrize(("old", "new", "pointer"), PLACES)
def test_a_registration_with_a_non_finite_number_is_a_422_at_that_number(
    app: Flask, old: str, new: str, pointer: str
) -> None:
    path = "/v1/models/demand/versions"
    response = app.test_client().post(
        path, data=_with({"model": normal_mean()["model"]}, old, new),
        content_type="application/json",
    )  # fmt: skip
    problem = check_flask("POST", path, response)
    assert response.status_code == 422, problem
    assert pointer in [e["pointer"] for e in problem["errors"]]
    assert model_rows(app) == 0
    assert app.test_client().get("/v1/models/demand/versions/1").status_code == 404


@pytest.mark.parametrize(("old", "new", "pointer"), PLACES)
def test_a_submission_with_a_non_finite_number_names_that_number(
    app: Flask, queue, old: str, new: str, pointer: str
) -> None:
    before = (row_counts(app), queue.length())
    response = app.test_client().post(
        "/v1/jobs", data=_with(normal_mean(), old, new), content_type="application/json"
    )
    problem = check_flask("POST", "/v1/jobs", response)
    assert response.status_code == 422, problem
    assert _names(pointer, [e["pointer"] for e in problem["errors"]])
    assert (row_counts(app), queue.length()) == before
