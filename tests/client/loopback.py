"""Small HTTP servers of our own on 127.0.0.1 for the client's retry and timeout tests.

Each runs http.server in a daemon thread and answers from a script, recording every request it
receives (time of arrival, method, path, headers), so a test can see how long the client waited
and what it sent again.
"""

from __future__ import annotations

import email.utils
import json
import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


@dataclass(frozen=True)
class Answer:
    status: int
    headers: dict[str, str] = field(default_factory=dict)
    body: dict | None = None
    hang_up: bool = False  # close the connection without answering at all
    # Promise this many more body bytes than are sent, then hang up (a download that breaks off).
    short_by: int = 0
    # Send "Retry-After" as an HTTP-date this many seconds after the moment of answering.
    retry_after_date_in: float | None = None


@dataclass
class Received:
    at: float  # time.monotonic() when the request arrived
    method: str
    path: str
    headers: dict[str, str]
    body: bytes


@dataclass
class ScriptedServer:
    answers: list[Answer]
    received: list[Received] = field(default_factory=list)
    url: str = ""


@contextmanager
def scripted_server(answers: list[Answer]) -> Iterator[ScriptedServer]:
    """Answer the n-th request with answers[n] (the last answer repeats)."""
    script = ScriptedServer(list(answers))
    lock = threading.Lock()

    class Handler(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def _serve(self) -> None:
            arrived = time.monotonic()
            length = int(self.headers.get("Content-Length") or 0)
            body = self.rfile.read(length) if length else b""
            with lock:
                index = len(script.received)
                script.received.append(
                    Received(arrived, self.command, self.path, dict(self.headers.items()), body)
                )
                answer = script.answers[min(index, len(script.answers) - 1)]
            if answer.hang_up:
                self.close_connection = True
                self.connection.shutdown(socket.SHUT_RDWR)
                return
            payload = json.dumps(answer.body or {}).encode()
            self.send_response(answer.status)
            kind = "application/problem+json" if answer.status >= 400 else "application/json"
            self.send_header("Content-Type", kind)
            self.send_header("Content-Length", str(len(payload) + answer.short_by))
            for name, value in answer.headers.items():
                self.send_header(name, value)
            if answer.retry_after_date_in is not None:
                when = time.time() + answer.retry_after_date_in
                self.send_header("Retry-After", email.utils.formatdate(when, usegmt=True))
            self.end_headers()
            self.wfile.write(payload)
            if answer.short_by:
                self.wfile.flush()
                self.close_connection = True
                self.connection.shutdown(socket.SHUT_RDWR)

        do_GET = _serve
        do_POST = _serve

        def log_message(self, format: str, *args: object) -> None:
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    server.daemon_threads = True
    script.url = f"http://127.0.0.1:{server.server_address[1]}"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield script
    finally:
        server.shutdown()
        server.server_close()


@contextmanager
def silent_server() -> Iterator[str]:
    """A listener that accepts connections, reads, and never answers; yields its URL."""
    listener = socket.create_server(("127.0.0.1", 0))
    held: list[socket.socket] = []
    stop = threading.Event()

    def accept() -> None:
        listener.settimeout(0.1)
        while not stop.is_set():
            try:
                connection, _ = listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            held.append(connection)

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{listener.getsockname()[1]}"
    finally:
        stop.set()
        thread.join(5)
        for connection in held:
            connection.close()
        listener.close()


def closed_port_url() -> str:
    """A loopback URL nobody listens on (the port was bound, then released)."""
    with socket.create_server(("127.0.0.1", 0)) as probe:
        port = probe.getsockname()[1]
    return f"http://127.0.0.1:{port}"
