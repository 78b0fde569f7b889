"""A gunicorn worker that reads each whole request in an event loop before an app thread sees it.

gunicorn's threaded worker gives a connection to a thread as soon as its first bytes arrive, and
the thread then blocks reading the rest: five clients sending one header line every few seconds
hold four threads. Here waitress's event loop (one thread, non-blocking sockets) buffers the
request line, headers and body (spooled to a temporary file past a threshold) and hands only
complete requests to the app threads, so a slow or idle client costs a socket and some buffer,
never a thread. gunicorn stays the process manager: `WEB_CONCURRENCY` processes, heart-beats,
graceful restarts, one config.

Two deadlines bound what a slow client may hold: the request line and headers must arrive within
`DRAWYARD_HEADER_READ_SECONDS` of the request's first byte, and the body within
`DRAWYARD_BODY_READ_SECONDS` of the end of the headers; after that the connection is closed. An idle
kept-alive connection is closed after gunicorn's `keepalive` seconds (at least one).
"""

from __future__ import annotations

import json
import os
import time
from typing import Any

from gunicorn.workers.base import Worker
from waitress import wasyncore
from waitress.adjustments import Adjustments
from waitress.channel import HTTPChannel
from waitress.server import TcpWSGIServer
from waitress.task import ErrorTask, ThreadedTaskDispatcher

from service.config import load_settings

# Headroom over the service's body limit that the event loop still reads, so that a body slightly
# too large reaches the app and gets its 413 problem document naming the limit; past it the loop
# stops reading and answers 413 itself.
BODY_HEADROOM_BYTES = 1024 * 1024


class ProblemErrorTask(ErrorTask):
    """The event loop's own refusals (413, 400, 431) as RFC 9457 problem documents."""

    def execute(self) -> None:
        error = self.request.error
        document = {
            "type": "urn:drawyard:problem:" + error.reason.lower().replace(" ", "-"),
            "title": error.reason,
            "status": error.code,
            "detail": str(error.body),
            "errors": [{"pointer": "", "message": str(error.body)}],
        }
        body = json.dumps(document).encode("utf-8")
        self.status = f"{error.code} {error.reason}"
        self.response_headers.append(("Content-Type", "application/problem+json"))
        self.set_close_on_finish()
        self.content_length = len(body)
        self.write(body)


class DeadlineChannel(HTTPChannel):
    """A connection that remembers when its partly read request began and when its headers ended."""

    error_task_class = ProblemErrorTask
    partial: Any = None
    partial_since = 0.0
    body_since = 0.0


class DeadlineServer(TcpWSGIServer):
    """waitress's server with read deadlines checked on every maintenance pass."""

    channel_class = DeadlineChannel
    header_seconds = 10.0
    body_seconds = 60.0

    def maintenance(self, now: float) -> None:
        super().maintenance(now)
        clock = time.monotonic()
        for channel in list(self.active_channels.values()):
            request = getattr(channel, "request", None)
            if request is None:
                channel.partial = None
                continue
            if channel.partial is not request:
                channel.partial, channel.partial_since, channel.body_since = request, clock, 0.0
                continue
            if not request.headers_finished:
                overdue = clock - channel.partial_since > self.header_seconds
            else:
                channel.body_since = channel.body_since or clock
                overdue = clock - channel.body_since > self.body_seconds
            if overdue:
                channel.will_close = True


class BufferedRequestWorker(Worker):
    """gunicorn worker class ``service.buffered_worker.BufferedRequestWorker``."""

    def run(self) -> None:
        settings = load_settings()
        listeners = [listener.sock for listener in self.sockets]
        adjustments = Adjustments(
            sockets=listeners,
            threads=max(1, self.cfg.threads),
            # Idle kept-alive connections; waitress counts whole seconds.
            channel_timeout=max(1, int(self.cfg.keepalive)),
            # Maintenance (idle and deadline checks) once a second.
            cleanup_interval=1,
            # Sockets are cheap here; the deadlines bound how long any one is held.
            connection_limit=max(100, self.cfg.worker_connections),
            max_request_body_size=settings.max_body_bytes + BODY_HEADROOM_BYTES,
            max_request_header_size=self.cfg.limit_request_field_size * 4 or 262144,
            trusted_proxy=_single_proxy(self.cfg.forwarded_allow_ips),
            trusted_proxy_headers={"x-forwarded-proto"},
            clear_untrusted_proxy_headers=True,
            ident="drawyard",
        )
        dispatcher = ThreadedTaskDispatcher()
        dispatcher.set_thread_count(adjustments.threads)
        loop_map: dict[int, Any] = {}
        servers = []
        for listener in listeners:
            server = DeadlineServer(
                self.wsgi,
                loop_map,
                True,
                listener,
                dispatcher=dispatcher,
                adj=adjustments,
                bind_socket=False,
                sockinfo=(listener.family, listener.type, listener.proto, listener.getsockname()),
            )
            server.header_seconds = settings.header_read_seconds
            server.body_seconds = settings.body_read_seconds
            servers.append(server)
        try:
            while self.alive:
                self.notify()
                if self.ppid != os.getppid():
                    self.log.info("Parent changed, shutting down: %s", self)
                    break
                wasyncore.loop(timeout=1.0, map=loop_map, use_poll=True, count=1)
        finally:
            for server in servers:
                server.accepting = False
            # Requests already handed to app threads finish within the graceful timeout.
            dispatcher.shutdown(cancel_pending=False, timeout=self.cfg.graceful_timeout)
            for fileno, channel in list(loop_map.items()):
                if not isinstance(channel, TcpWSGIServer):
                    channel.close()
                loop_map.pop(fileno, None)


def _single_proxy(allowed: list[str] | str) -> str | None:
    """waitress trusts one proxy address (or "*"); gunicorn's setting is a list."""
    entries = [allowed] if isinstance(allowed, str) else list(allowed)
    entries = [entry.strip() for entry in entries if entry.strip()]
    if "*" in entries:
        return "*"
    return entries[0] if entries else None

