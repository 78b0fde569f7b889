"""Completion callbacks: a job may name a URL that is told, by a signed POST, when the job ends.

Only URLs under a configured prefix are accepted (DRAWYARD_CALLBACK_ALLOW), so a submission cannot
make the workers call arbitrary hosts. The body is the job's status document, exactly as
GET /v1/jobs/<id> returns it. It is signed as the Standard Webhooks specification (an open
specification for signed webhooks, standardwebhooks.com) says: headers ``webhook-id`` (one id per
job's callback, the same on every retry, so a receiver can drop duplicates), ``webhook-timestamp``
(Unix seconds of this attempt) and ``webhook-signature``: ``v1,`` and the base64 of the
HMAC-SHA256 (RFC 2104) of ``<id>.<timestamp>.<body bytes>``. The key is the secret
DRAWYARD_CALLBACK_SECRET: in the specification's form ``whsec_<base64>`` it is the decoded bytes;
any other string is used as its UTF-8 bytes. The timestamp is part of the signed message, so a
receiver that rejects old timestamps cannot be fed a recorded request again. Delivery runs in a
Celery task that retries with doubling delays up to DRAWYARD_CALLBACK_ATTEMPTS attempts, each
within one deadline of DRAWYARD_CALLBACK_TIMEOUT seconds for the whole exchange; every attempt is
written to the job's event log. The task runs on the closing queue's own worker, never in a
chain's process.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import hmac
import json
import logging
import re
import time
from dataclasses import dataclass
from http.client import HTTPException
from typing import Any
from urllib.parse import urlsplit

from sqlalchemy import select

from service import events
from service.bounded_post import post_within
from service.config import Settings
from service.job_resources import job_resource
from service.runtime import Runtime
from service.store.engine import transaction
from service.store.models import Chain, Job
from worker.problems import Problem

log = logging.getLogger(__name__)

ID_HEADER = "webhook-id"
SIGNATURE_HEADER = "webhook-signature"
TIMESTAMP_HEADER = "webhook-timestamp"
ATTEMPT_HEADER = "drawyard-attempt"  # ours, beside the specification's three
SECRET_PREFIX = "whsec_"
POINTER = "/notify/url"
# The task is sent by name so the API needs no task code imported (as in service/dispatch.py).
DELIVER_CALLBACK = "drawyard.deliver_callback"


def allowed_prefixes(settings: Settings) -> list[str]:
    return [part for part in re.split(r"[\s,]+", settings.callback_allow) if part]


class UnusableUrl(ValueError):
    """A callback URL that cannot be parsed or is refused outright; the message says why."""


DEFAULT_PORTS = {"http": 80, "https": 443}
UNRESERVED = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-._~")
PERCENT_TRIPLET = re.compile(r"%([0-9A-Fa-f]{2})")
DOT_SEGMENT = re.compile(r"(^|/)\.{1,2}(/|$)")


def _percent_normalised(text: str) -> str:
    """RFC 3986 section 6.2.2.2: unreserved characters decoded, other triplets in upper case."""

    def one(match: re.Match[str]) -> str:
        char = chr(int(match.group(1), 16))
        return char if char in UNRESERVED else "%" + match.group(1).upper()

    return PERCENT_TRIPLET.sub(one, text)


def normalised_url(url: str) -> str:
    """The URL in RFC 3986 section 6.2.2 normal form (case, percent-encoding, default port,
    empty path), or UnusableUrl.

    Refused outright rather than resolved: dot segments and encoded dots (which would reach
    other paths on an allowed host), user information (``https://allowed@other/``), backslashes
    and control characters (which parsers disagree about).
    """
    if any(ord(c) < 0x21 or c in "\\\x7f" for c in url):
        raise UnusableUrl("The URL holds spaces, control characters or backslashes.")
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError as error:
        raise UnusableUrl(f"The URL cannot be parsed ({error}).") from None
    scheme = parts.scheme.lower()
    if scheme not in DEFAULT_PORTS:
        raise UnusableUrl("The URL must start with http:// or https://.")
    if not parts.hostname:
        raise UnusableUrl("The URL names no host.")
    if "@" in parts.netloc:
        raise UnusableUrl("The URL may not carry user information ('name@' before the host).")
    if re.search(r"%2e", url, re.IGNORECASE):
        raise UnusableUrl("The URL may not hold encoded dots ('%2e').")
    if DOT_SEGMENT.search(parts.path):
        raise UnusableUrl("The URL's path may not hold '.' or '..' segments.")
    host = parts.hostname.lower()
    if ":" in host:
        host = f"[{host}]"
    authority = host if port in (None, DEFAULT_PORTS[scheme]) else f"{host}:{port}"
    path = _percent_normalised(parts.path) or "/"
    query = f"?{_percent_normalised(parts.query)}" if parts.query else ""
    return f"{scheme}://{authority}{path}{query}"


def url_allowed(url: str, prefixes: list[str]) -> bool:
    """True when ``url``, normalised, starts with a normalised prefix at a boundary.

    The boundary matters: the prefix "https://hooks.example" must not admit
    "https://hooks.example.evil.net/", so after a prefix not ending in "/" the URL must end or
    go on with "/", "?" or "#". UnusableUrl when the URL itself is refused.
    """
    target = normalised_url(url)
    for raw in prefixes:
        try:
            prefix = normalised_url(raw)
        except UnusableUrl:
            continue
        if not target.startswith(prefix):
            continue
        rest = target[len(prefix) :]
        if prefix.endswith("/") or rest == "" or rest[0] in "/?#":
            return True
    return False


def notify_problems(body: Any, settings: Settings) -> list[Problem]:
    """Problems with a submission's ``notify`` member (none when it has none)."""
    if not isinstance(body, dict) or not isinstance(body.get("notify"), dict):
        return []
    url = body["notify"].get("url")
    if not isinstance(url, str):
        return []  # the schema reports the missing or mistyped URL
    if not settings.callback_secret:
        return [Problem(POINTER, "This service is not set up to send completion callbacks.")]
    try:
        allowed = url_allowed(url, allowed_prefixes(settings))
    except UnusableUrl as error:
        return [Problem(POINTER, str(error))]
    if not allowed:
        return [
            Problem(
                POINTER,
                "This callback URL is not under any prefix this service may call; ask the "
                "operator to add it to the allowed callback prefixes.",
            )
        ]
    return []


def signing_key(secret: str) -> bytes:
    """The HMAC key: a ``whsec_`` secret's base64-decoded bytes, else the secret's UTF-8 bytes."""
    if secret.startswith(SECRET_PREFIX):
        try:
            return base64.b64decode(secret[len(SECRET_PREFIX) :], validate=True)
        except binascii.Error:
            pass  # not base64 after all: the whole string is the key
    return secret.encode()


def sign(secret: str, message_id: str, timestamp: str, body: bytes) -> str:
    """The webhook-signature value: `v1,` and the base64 HMAC-SHA256 of `id.timestamp.body`."""
    signed = message_id.encode() + b"." + timestamp.encode() + b"." + body
    digest = hmac.new(signing_key(secret), signed, hashlib.sha256).digest()
    return "v1," + base64.b64encode(digest).decode()


def message_id(job_id: str) -> str:
    """One id per job's completion callback, kept across retries (a job ends only once)."""
    return f"msg_{job_id}"


def callback_url(runtime: Runtime, job_id: str) -> str | None:
    # Only the notify member of the stored body is read, not the data beside it.
    with runtime.sessions() as session:
        notify = session.scalar(select(Job.body["notify"]).where(Job.id == job_id))
    return notify.get("url") if isinstance(notify, dict) else None


def queue_callback(runtime: Runtime, job_id: str) -> None:
    """Queue the delivery of a job's completion callback, if its submission asked for one."""
    if callback_url(runtime, job_id) is None:
        return
    runtime.celery.send_task(
        DELIVER_CALLBACK, args=[job_id], queue=runtime.settings.closing_queue, retry=True
    )


def _job_and_chains(runtime: Runtime, job_id: str) -> tuple[Job, list[Chain]]:
    # Read directly, not through the API's queries: a worker has no caller whose view applies.
    with runtime.sessions() as session:
        job = session.scalars(select(Job).where(Job.id == job_id)).one()
        chains = session.scalars(
            select(Chain).where(Chain.job_id == job_id).order_by(Chain.chain_index)
        ).all()
    return job, list(chains)


def queue_callback_safely(runtime: Runtime, job_id: str) -> None:
    """queue_callback for a job that has just closed: a broker failure is logged, not raised.

    The job's final state is already committed and must stand; the event log says the callback
    was never sent.
    """
    try:
        queue_callback(runtime, job_id)
    except Exception as error:
        log.exception("completion callback of job %s could not be queued", job_id)
        with transaction(runtime.sessions) as session:
            detail = {"error": f"{type(error).__name__}: {error}"[:500]}
            events.record(session, job_id, "callback_not_queued", detail=detail)


@dataclass(frozen=True)
class Outcome:
    delivered: bool
    retry_in: float | None  # seconds until the next attempt; None when there is none


def retry_delay(settings: Settings, attempt: int) -> float:
    """Exponential backoff: the base delay after the first attempt, doubling after each."""
    return settings.callback_backoff * 2 ** (attempt - 1)


def deliver(runtime: Runtime, job_id: str, attempt: int) -> Outcome:
    """One attempt: POST the signed status; record the attempt; say whether to try again."""
    settings = runtime.settings
    url = callback_url(runtime, job_id)
    if url is None:
        return Outcome(False, None)
    job, chains = _job_and_chains(runtime, job_id)
    body = json.dumps(job_resource(job, chains), separators=(",", ":")).encode()
    timestamp = str(int(time.time()))
    identity = message_id(job_id)
    headers = {
        "Content-Type": "application/json",
        ID_HEADER: identity,
        SIGNATURE_HEADER: sign(settings.callback_secret, identity, timestamp, body),
        TIMESTAMP_HEADER: timestamp,
        ATTEMPT_HEADER: str(attempt),
    }
    detail: dict[str, Any] = {"attempt": attempt, "url": url}
    try:
        # One deadline for the whole attempt, and no redirects (they could leave the prefixes).
        status = post_within(url, body, headers, settings.callback_timeout)
        detail["status_code"] = status
        delivered = 200 <= status < 300
    except (OSError, HTTPException) as error:
        detail["error"] = f"{type(error).__name__}: {error}"[:500]
        delivered = False
    detail["delivered"] = delivered
    retry_in = None
    if not delivered and attempt < settings.callback_attempts:
        retry_in = retry_delay(settings, attempt)
        detail["next_attempt_in_seconds"] = retry_in
    with transaction(runtime.sessions) as session:
        events.record(session, job_id, "callback_attempt", job.state, detail=detail)
        if not delivered and retry_in is None:
            events.record(
                session, job_id, "callback_abandoned", job.state, detail={"attempts": attempt}
            )
    return Outcome(delivered, retry_in)
