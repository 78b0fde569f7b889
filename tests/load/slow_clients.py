"""Slow clients for the load run and the tests: connections that trickle a request and never finish.

Half stall inside the headers (a request line, then one header line now and then), half inside a
body they announced as large (the "slow headers" and "slow body" attacks, common practice in HTTP
server hardening). A server whose request threads read requests themselves runs out of threads.
"""

from __future__ import annotations

import contextlib
import socket
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np
import requests

HEALTH_PATH = "/v1/health/live"


def open_slow(host: str, port: int, index: int) -> socket.socket:
    """A connection stalled in its headers (even index) or in a 5 MB body it announced (odd)."""
    sock = socket.create_connection((host, port), timeout=5)
    if index % 2 == 0:
        sock.sendall(b"GET /v1/jobs HTTP/1.1\r\nHost: x\r\n")
    else:
        sock.sendall(
            b"POST /v1/jobs HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
            b'Content-Length: 5000000\r\n\r\n{"model": '
        )
    return sock


def trickle(sock: socket.socket, index: int) -> bool:
    """Send one more header line or body byte; False when the server has closed the connection."""
    try:
        sock.sendall(b"X-Slow: 1\r\n" if index % 2 == 0 else b" ")
        return True
    except OSError:
        return False


@contextlib.contextmanager
def held(host: str, port: int, count: int) -> Iterator[list[socket.socket]]:
    """``count`` slow connections, all closed on leaving."""
    sockets = [open_slow(host, port, i) for i in range(count)]
    try:
        yield sockets
    finally:
        for sock in sockets:
            sock.close()


@dataclass
class HealthFigures:
    held: int
    latencies: list[float] = field(default_factory=list)
    errors: list[str] = field(default_factory=list)
    reopened: int = 0

    def line(self) -> str:
        times = np.asarray(self.latencies) * 1000
        p50, p99 = (np.percentile(times, [50, 99]) if times.size else (float("nan"),) * 2)
        return (
            f"slow clients: {self.held} held open (re-opened {self.reopened} times after the "
            f"server closed them); health: {times.size} probes, {len(self.errors)} errors, "
            f"p50 {p50:.1f} ms, p99 {p99:.1f} ms, max {times.max() if times.size else 0:.1f} ms"
        )


def hold_and_probe(
    host: str, port: int, base_url: str, count: int, seconds: float
) -> HealthFigures:
    """Keep ``count`` slow connections open for ``seconds`` (re-opening any the server closes)
    while probing health ten times a second; the probes' latencies are the figures."""
    figures = HealthFigures(count)
    stop = threading.Event()

    def keep_trickling() -> None:
        sockets = [open_slow(host, port, i) for i in range(count)]
        try:
            while not stop.wait(1.0):
                for i, sock in enumerate(sockets):
                    if not trickle(sock, i):
                        sock.close()
                        sockets[i] = open_slow(host, port, i)
                        figures.reopened += 1
        finally:
            for sock in sockets:
                sock.close()

    holder = threading.Thread(target=keep_trickling)
    holder.start()
    try:
        time.sleep(1.0)
        stop_at = time.monotonic() + seconds
        session = requests.Session()
        while time.monotonic() < stop_at:
            started = time.perf_counter()
            try:
                response = session.get(base_url + HEALTH_PATH, timeout=10)
                if response.status_code != 200:
                    figures.errors.append(f"health: {response.status_code}")
            except requests.RequestException as error:
                figures.errors.append(f"health: {error}")
            figures.latencies.append(time.perf_counter() - started)
            time.sleep(0.1)
    finally:
        stop.set()
        holder.join()
    return figures
