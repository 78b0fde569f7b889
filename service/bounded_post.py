"""One HTTP POST with a deadline for the whole exchange, not for each read.

A socket timeout bounds each read, so a receiver sending one byte just inside it can hold the
caller for ever. Here a timer shuts the socket down when the deadline passes, which wakes a read
blocked in another thread (shutdown(2) on Linux); the caller then sees the exchange fail.
"""

from __future__ import annotations

import contextlib
import http.client
import socket
import ssl
import threading
import time
from urllib.parse import urlsplit

# A callback's answer is only looked at for its status; more than this is not read.
MAX_ANSWER_BYTES = 64 * 1024


class DeadlinePassed(OSError):
    """The exchange did not finish within its deadline."""


def post_within(url: str, body: bytes, headers: dict[str, str], seconds: float) -> int:
    """POST ``body`` to ``url`` and return the status; OSError/HTTPException on failure.

    No redirects are followed (the caller's allow-list applies to this URL only).
    """
    parts = urlsplit(url)
    started = time.monotonic()
    host, port = parts.hostname or "", parts.port
    if parts.scheme == "https":
        connection: http.client.HTTPConnection = http.client.HTTPSConnection(
            host, port, timeout=seconds, context=ssl.create_default_context()
        )
    else:
        connection = http.client.HTTPConnection(host, port, timeout=seconds)
    expired = threading.Event()

    def cut() -> None:
        expired.set()
        sock = connection.sock
        if sock is not None:
            # The plain socket's shutdown, also under TLS: it must not touch the TLS state that
            # the blocked reader is using.
            with contextlib.suppress(OSError):
                socket.socket.shutdown(sock, socket.SHUT_RDWR)

    timer = threading.Timer(seconds, cut)
    timer.daemon = True
    timer.start()
    try:
        path = (parts.path or "/") + (f"?{parts.query}" if parts.query else "")
        connection.request("POST", path, body=body, headers=headers)
        response = connection.getresponse()
        response.read(MAX_ANSWER_BYTES)
        if expired.is_set():
            raise DeadlinePassed(f"no complete answer within {seconds:g} s")
        return response.status
    except (OSError, http.client.HTTPException) as error:
        if expired.is_set() or time.monotonic() - started >= seconds:
            raise DeadlinePassed(f"no complete answer within {seconds:g} s") from error
        raise
    finally:
        timer.cancel()
        connection.close()
