"""A callback receiver on loopback: a real HTTP server (http.server) in a thread.

It checks each request's signature as a receiver would, from the published recipe and not from
drawyard's code: HMAC-SHA256 (RFC 2104, with SHA-256 from FIPS 180-4) keyed with the shared secret
over ``timestamp + "." + body``, compared in constant time with hmac.compare_digest.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import threading
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


@dataclass
class Received:
    path: str
    body: bytes
    timestamp: str
    signature: str
    attempt: str
    signature_valid: bool
    answered: int


@dataclass
class Receiver:
    """Answers POSTs to a path with the statuses in ``plan[path]`` in turn, then 200."""

    secret: str
    plan: dict[str, list[int]] = field(default_factory=dict)
    received: list[Received] = field(default_factory=list)
    _server: ThreadingHTTPServer | None = None
    _lock: threading.Lock = field(default_factory=threading.Lock)

    @property
    def base_url(self) -> str:
        assert self._server is not None
        return f"http://127.0.0.1:{self._server.server_address[1]}"

    def start(self) -> Receiver:
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 (http.server's naming)
                body = self.rfile.read(int(self.headers.get("Content-Length", "0")))
                timestamp = self.headers.get("X-Drawyard-Timestamp", "")
                signature = self.headers.get("X-Drawyard-Signature", "")
                expected = "sha256=" + hmac.new(
                    receiver.secret.encode(), timestamp.encode() + b"." + body, hashlib.sha256
                ).hexdigest()
                valid = hmac.compare_digest(expected, signature)
                with receiver._lock:
                    queue = receiver.plan.setdefault(self.path, [])
                    status = queue.pop(0) if queue else 200
                    status = status if valid else 401
                    receiver.received.append(
                        Received(
                            self.path,
                            body,
                            timestamp,
                            signature,
                            self.headers.get("X-Drawyard-Attempt", ""),
                            valid,
                            status,
                        )
                    )
                self.send_response(status)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: object) -> None:
                pass

        self._server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        threading.Thread(target=self._server.serve_forever, daemon=True).start()
        return self

    def stop(self) -> None:
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()

    def for_path(self, path: str) -> list[Received]:
        with self._lock:
            return [r for r in self.received if r.path == path]

    def documents(self, path: str) -> list[dict]:
        return [json.loads(r.body) for r in self.for_path(path)]
