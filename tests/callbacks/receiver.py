"""A callback receiver on loopback: a real HTTP server (http.server) in a thread.

It checks each request's signature as a receiver would, from the Standard Webhooks specification
(standardwebhooks.com, "Verifying webhook authenticity"; from memory) and not from drawyard's code:
the signed content is ``webhook-id + "." + webhook-timestamp + "." + body``; the signature is
HMAC-SHA256 (RFC 2104, with SHA-256 from FIPS 180-4) keyed with the secret (a ``whsec_`` secret's
base64-decoded bytes), base64-encoded and prefixed ``v1,``; ``webhook-signature`` is a
space-separated list of such signatures, any one of which may match (compared in constant time with
hmac.compare_digest).
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import threading
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


def signing_key(secret: str) -> bytes:
    if secret.startswith("whsec_"):
        return base64.b64decode(secret[len("whsec_") :])
    return secret.encode()


def genuine(secret: str, message_id: str, timestamp: str, body: bytes, header: str) -> bool:
    content = f"{message_id}.{timestamp}.".encode() + body
    digest = hmac.new(signing_key(secret), content, hashlib.sha256).digest()
    expected = "v1," + base64.b64encode(digest).decode()
    return any(hmac.compare_digest(expected, candidate) for candidate in header.split(" "))


@dataclass
class Received:
    path: str
    body: bytes
    message_id: str
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
                message_id = self.headers.get("webhook-id", "")
                timestamp = self.headers.get("webhook-timestamp", "")
                signature = self.headers.get("webhook-signature", "")
                valid = genuine(receiver.secret, message_id, timestamp, body, signature)
                with receiver._lock:
                    queue = receiver.plan.setdefault(self.path, [])
                    status = queue.pop(0) if queue else 200
                    status = status if valid else 401
                    receiver.received.append(
                        Received(
                            self.path,
                            body,
                            message_id,
                            timestamp,
                            signature,
                            self.headers.get("drawyard-attempt", ""),
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
