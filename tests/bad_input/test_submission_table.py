"""Malformed submissions get a 4xx problem document naming the field, and leave no trace.

Each case of tests/bad_input/cases.py is sent to a real app on a real store (SQLite and
PostgreSQL) and a real Redis broker; the same table is then sent over real HTTP to gunicorn.
References: RFC 9457 (problem documents: application/problem+json with type, title, status,
detail; extension members such as our "errors"), RFC 6901 (JSON pointers), RFC 9110 section 15.5
(4xx statuses).
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from typing import Any

import pytest
import redis
import requests
from flask import Flask
from sqlalchemy import create_engine, func, select
from sqlalchemy.engine import Engine

from service.app import create_app
from service.store.models import Base
from tests.bad_input.cases import CASES, LIMITS, Case

PROBLEM = "application/problem+json"


def table_counts(engine: Engine) -> dict[str, int]:
    """Rows in every table of the store (access tables included: they share the metadata)."""
    import service.store.access_models  # noqa: F401  (registers the keys table)

    with engine.connect() as connection:
        return {
            table.name: connection.scalar(select(func.count()).select_from(table))
            for table in Base.metadata.sorted_tables
        }


def queue_state(client: redis.Redis) -> dict[str, int]:
    """Every key in the broker's Redis database and the length of every list (queues)."""
    state = {"keys": int(client.dbsize())}
    for key in client.scan_iter():
        if client.type(key) == b"list":
            state[key.decode(errors="replace")] = int(client.llen(key))
    return state


def unescape(token: str) -> str:
    return token.replace("~1", "/").replace("~0", "~")


def parent_resolves(body: Any, pointer: str) -> bool:
    """RFC 6901: every token but the last must lead into the document (the last may be the
    missing member being reported)."""
    if pointer == "":
        return True
    if not pointer.startswith("/"):
        return False
    target = body
    for token in [unescape(t) for t in pointer[1:].split("/")][:-1]:
        if isinstance(target, dict) and token in target:
            target = target[token]
        elif isinstance(target, list) and token.isdigit() and int(token) < len(target):
            target = target[int(token)]
        else:
            return False
    return True


def check_answer(case: Case, status: int, content_type: str, document: Any) -> None:
    assert 400 <= status < 500, (case.name, status, document)
    assert status == case.status, (case.name, status, document)
    assert content_type.startswith(PROBLEM), (case.name, content_type)
    for member, kind in (("type", str), ("title", str), ("status", int), ("detail", str)):
        assert isinstance(document.get(member), kind), (case.name, member, document)
    assert document["status"] == status
    pointers = [e["pointer"] for e in document.get("errors", []) if "pointer" in e]
    assert any(p == case.pointer or p.startswith(case.pointer + "/") for p in pointers), (
        case.name, case.pointer, document)
    try:
        sent = json.loads(case.body)
    except (ValueError, RecursionError):
        sent = None
    if isinstance(sent, dict):
        bad = [p for p in pointers if not parent_resolves(sent, p)]
        assert not bad, (case.name, bad)
    text = json.dumps(document)
    for word in case.says:
        assert word in text, (case.name, word, document)


@pytest.fixture
def app(database_url: str, redis_url: str) -> Iterator[Flask]:
    app = create_app({"database_url": database_url, "broker_url": redis_url, **LIMITS})
    yield app
    app.extensions["drawyard"].close()


def send_with_client(app: Flask, case: Case):
    headers = {"Content-Type": case.content_type} if case.content_type else {}
    return app.test_client().post("/v1/jobs", data=case.body, headers=headers)


def test_table_has_enough_cases():
    assert len(CASES) >= 40 and len({c.name for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_submission_refused_without_trace(case: Case, app: Flask, redis_url: str):
    runtime = app.extensions["drawyard"]
    broker = redis.Redis.from_url(redis_url)
    before = (table_counts(runtime.engine), queue_state(broker))
    answer = send_with_client(app, case)
    check_answer(case, answer.status_code, answer.content_type, answer.get_json(force=True))
    assert (table_counts(runtime.engine), queue_state(broker)) == before, case.name


def test_table_over_real_http(live_service, redis_url: str, tmp_path):
    """The same table through gunicorn: no 5xx, same statuses, store and queue untouched."""
    from service.store import migrate

    store = f"sqlite:///{(tmp_path / 'bad-input.sqlite').resolve()}"
    migrate(store)
    env = {f"DRAWYARD_{name.upper()}": str(value) for name, value in LIMITS.items()}
    service = live_service(store, redis_url, workers=0, env=env)
    engine = create_engine(store)
    broker = redis.Redis.from_url(redis_url)
    before = (table_counts(engine), queue_state(broker))
    with requests.Session() as http:
        for case in CASES:
            headers = {"Content-Type": case.content_type} if case.content_type else {}
            answer = http.post(f"{service.base_url}/v1/jobs", data=case.body, headers=headers,
                               timeout=30)
            check_answer(case, answer.status_code, answer.headers.get("Content-Type", ""),
                         answer.json())
    assert (table_counts(engine), queue_state(broker)) == before
    engine.dispose()
