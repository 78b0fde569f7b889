"""Finishing steps and callbacks run on their own queue and worker, never behind or inside chains.

Real parts: gunicorn, one chain worker process, the closing worker, the sweeper, Redis, SQLite.
Issue 13 items 3 and 11: a job whose chains had all succeeded stayed `running` until unrelated
chains drained, and a callback receiver sending one byte every few seconds held the only worker
process (the timeout applied per read) while other tenants' chains waited.
"""

from __future__ import annotations

import socket
import threading
import time
from dataclasses import dataclass, field

import pytest
import requests

from service.store import migrate
from tests.callbacks.test_callback_delivery import SECRET, callback_events, wait, with_notify
from tests.conftest import sqlite_url
from tests.service.bodies import normal_mean

pytestmark = pytest.mark.services


def migrated_sqlite(tmp_path) -> str:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    return url


def state(base: str, job_id: str) -> str:
    return requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()["state"]


def chain_states(base: str, job_id: str) -> list[str]:
    job = requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()
    return [chain["state"] for chain in job["chains"]]


def submit(base: str, body: dict) -> str:
    response = requests.post(f"{base}/v1/jobs", json=body, timeout=60)
    assert response.status_code == 202, response.text
    return response.json()["id"]


def test_a_job_ends_while_other_jobs_chains_still_wait(redis_server, live_service, tmp_path):
    service = live_service(migrated_sqlite(tmp_path), redis_server.url, workers=1)
    base = service.base_url
    # The only chain process is kept busy while the queue fills: first a short job's chain, then
    # six jobs whose chains take a few seconds each, all behind it.
    blocker = submit(base, normal_mean(chains=1, warmup=500, draws=60_000, seed=3))
    wait(lambda: state(base, blocker) == "running", 60, "the blocking job to start")
    first = submit(base, normal_mean(chains=1, warmup=20, draws=20, seed=1))
    others = [submit(base, normal_mean(chains=1, warmup=500, draws=20_000, seed=10 + i))
              for i in range(6)]
    assert state(base, first) == "queued", "the queue did not fill while the blocker ran"
    wait(lambda: state(base, first) == "succeeded", 120, "the first job to succeed")
    still_waiting = [job for job in others if chain_states(base, job) != ["succeeded"]]
    # With the finishing step queued behind the six chains, every one of them had run first.
    assert len(still_waiting) >= 3, (still_waiting, service.logs())
    for job in [blocker, *others]:
        requests.post(f"{base}/v1/jobs/{job}/cancel", timeout=30)


@dataclass
class TricklingReceiver:
    """Answers a status line at once, then one header byte every second for ``seconds``."""

    seconds: float
    accepted: threading.Event = field(default_factory=threading.Event)
    cut_short: list[bool] = field(default_factory=list)
    sock: socket.socket = field(default_factory=socket.socket)

    def start(self) -> TricklingReceiver:
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(4)
        threading.Thread(target=self._serve, daemon=True).start()
        return self

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.sock.getsockname()[1]}/hook"

    def _serve(self) -> None:
        while True:
            try:
                connection, _ = self.sock.accept()
            except OSError:
                return
            self.accepted.set()
            threading.Thread(target=self._trickle, args=(connection,), daemon=True).start()

    def _trickle(self, connection: socket.socket) -> None:
        stop_at = time.monotonic() + self.seconds
        try:
            connection.recv(65536)
            connection.sendall(b"HTTP/1.1 200 OK\r\nX-Slow: ")
            while time.monotonic() < stop_at:
                time.sleep(1.0)
                connection.sendall(b"a")
            self.cut_short.append(False)
        except OSError:
            self.cut_short.append(True)
        finally:
            connection.close()

    def stop(self) -> None:
        self.sock.close()


def test_a_trickling_receiver_holds_neither_chains_nor_more_than_the_deadline(
    redis_server, live_service, tmp_path
):
    receiver = TricklingReceiver(seconds=60).start()
    try:
        service = live_service(
            migrated_sqlite(tmp_path), redis_server.url, workers=1,
            env={"DRAWYARD_CALLBACK_ALLOW": receiver.url.rsplit("/", 1)[0] + "/",
                 "DRAWYARD_CALLBACK_SECRET": SECRET, "DRAWYARD_CALLBACK_TIMEOUT": "12",
                 "DRAWYARD_CALLBACK_ATTEMPTS": "1"},
        )
        base = service.base_url
        noisy = submit(base, with_notify(normal_mean(chains=1, warmup=20, draws=20), receiver.url))
        assert receiver.accepted.wait(120), service.logs()
        # While the receiver holds the delivery, another tenant's job runs to its end.
        other = submit(base, normal_mean(chains=1, warmup=20, draws=20, seed=2))
        wait(lambda: state(base, other) == "succeeded", 60, "the other job to succeed")
        assert receiver.cut_short == [], "the receiver was cut off before the other job ended"
        # The attempt ends at its deadline (12 s), long before the receiver's 60 s of trickling.
        events = wait(lambda: callback_events(base, noisy), 60, "the callback attempt")
        attempt = events[0]["detail"]
        assert attempt["delivered"] is False
        assert "within 12 s" in attempt["error"], attempt
        wait(lambda: receiver.cut_short, 10, "the receiver to see the connection dropped")
        assert receiver.cut_short == [True]
    finally:
        receiver.stop()
