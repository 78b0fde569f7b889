"""Property-based fuzzing of every operation in the served OpenAPI document (/v1/openapi.json).

schemathesis (a general-purpose API testing library from the package registry) draws requests
from the document's own schemas, sends them to gunicorn on loopback, and checks each answer: no
5xx, and the status, content type and body conform to what the document declares (OpenAPI 3.1,
JSON Schema 2020-12). A few hundred cases per operation; a few thousand in all. The count of
requests sent and the wall time are printed (run with -s to see them); no assertion is timed.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from service.store import migrate
from tests.harness.live_service import start_live_service

# 500 per operation: 4,502 requests in about 51 s on the 2-core development machine (1,000 per
# operation, 9,002 requests in about 88 s, found nothing more); the count is printed with -s.
CASES_PER_OPERATION = 500
# What the issue asks: no 5xx, and every answer as the document declares it. Not included:
# "a schema-valid request is accepted", since the model's semantic rules (every unknown has a
# prior, names are declared) are checked by the engine and cannot be written as a JSON Schema.
CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_schema_conformance,
    response_headers_conformance,
]


@pytest.fixture(scope="module")
def served(redis_server, tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    folder: Path = tmp_path_factory.mktemp("fuzz")
    store = f"sqlite:///{(folder / 'fuzz.sqlite').resolve()}"
    migrate(store)
    env = {"DRAWYARD_MAX_DRAWS": "2000", "DRAWYARD_MAX_BODY_BYTES": "200000"}
    service = start_live_service(store, redis_server.url, 0, env, folder / "logs")
    yield service.base_url
    service.stop()


@pytest.fixture(scope="module")
def api_schema(served: str):
    return schemathesis.openapi.from_url(f"{served}/v1/openapi.json")


def fuzz(operation) -> int:
    """Send CASES_PER_OPERATION generated requests to one operation; how many were sent."""
    sent = 0

    @settings(
        max_examples=CASES_PER_OPERATION,
        deadline=None,
        suppress_health_check=list(HealthCheck),
        derandomize=True,
        database=None,
    )
    @given(case=operation.as_strategy())
    def check(case) -> None:
        nonlocal sent
        sent += 1
        case.call_and_validate(checks=CHECKS, timeout=30)

    check()
    return sent


@pytest.mark.slow
def test_no_server_errors_and_answers_match_the_document(api_schema) -> None:
    operations = [result.ok() for result in api_schema.get_all_operations()]
    assert len(operations) >= 8
    started = time.monotonic()
    sent = {f"{op.method.upper()} {op.path}": fuzz(op) for op in operations}
    elapsed = time.monotonic() - started
    for label, count in sent.items():
        print(f"fuzzed {label}: {count} requests")
    print(f"fuzzed {len(sent)} operations: {sum(sent.values())} requests in {elapsed:.0f} s")
