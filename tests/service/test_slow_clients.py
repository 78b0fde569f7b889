"""Slow and idle clients against the real API (gunicorn with its production config, one process and
four app threads), a real Celery worker, Redis and SQLite.

The attack is the one issue 13 item 1 describes (a "slow headers" / "slow body" client, common
practice in HTTP server hardening): connections that send a request line and then trickle header
lines, or announce a large Content-Length and send part of the body. With a server whose threads
read requests themselves, four such connections hold every thread and health stops answering.
"""

from __future__ import annotations

import socket
import time
from collections.abc import Iterator
from urllib.parse import urlsplit

import pytest
import requests

from tests.conftest import sqlite_url
from tests.load.slow_clients import HEALTH_PATH, held, trickle

pytestmark = pytest.mark.services
SLOW_CONNECTIONS = 50


def _closed_by_server(sock: socket.socket, within: float) -> bool:
    """True when the server closes (or resets) the connection within ``within`` seconds."""
    sock.settimeout(within)
    try:
        while True:
            chunk = sock.recv(65536)
            if not chunk:
                return True
    except (ConnectionResetError, BrokenPipeError):
        return True
    except TimeoutError:
        return False


def test_health_answers_while_fifty_slow_clients_are_held(redis_server, live_service, tmp_path):
    service = live_service(
        sqlite_url(tmp_path / "store.sqlite"),
        redis_server.url,
        env={"GUNICORN_THREADS": "4", "DRAWYARD_HEADER_READ_SECONDS": "3",
             "DRAWYARD_BODY_READ_SECONDS": "3"},
    )
    parts = urlsplit(service.base_url)
    with held(parts.hostname, parts.port, SLOW_CONNECTIONS) as slow:
        # Every slow client keeps trickling (one header line, or a body byte) while health is asked.
        assert all(trickle(sock, index) for index, sock in enumerate(slow))
        answers = []
        for _ in range(3):
            started = time.monotonic()
            # A generous socket timeout: the point is that an answer arrives at all.
            response = requests.get(service.base_url + HEALTH_PATH, timeout=10)
            answers.append((response.status_code, time.monotonic() - started))
        assert [status for status, _ in answers] == [200, 200, 200], service.logs()
        assert all(seconds < 1.0 for _, seconds in answers), answers
        # The deadlines (3 s here) then close every stalled connection: none is held for ever.
        closed = [_closed_by_server(sock, within=10.0) for sock in slow]
        assert all(closed), f"{closed.count(False)} slow connections still open after 10 s"


def test_a_body_past_the_limit_sent_chunked_is_a_413_problem(redis_server, live_service, tmp_path):
    """The event loop counts the bytes it reads, whatever the framing (issue 13 item 9)."""
    service = live_service(
        sqlite_url(tmp_path / "store.sqlite"), redis_server.url,
        env={"DRAWYARD_MAX_BODY_BYTES": "100000"},
    )

    def chunks() -> Iterator[bytes]:
        yield b'{"model": {}, "pad": "'
        for _ in range(300):
            yield b"x" * 1000
        yield b'"}'

    response = requests.post(
        service.base_url + "/v1/jobs", data=chunks(),
        headers={"Content-Type": "application/json"}, timeout=30,
    )
    assert response.status_code == 413, response.text
    assert response.headers["Content-Type"].startswith("application/problem+json")
    assert response.json()["errors"][0]["pointer"] == ""
