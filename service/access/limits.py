"""Per-key request rate (a fixed-window counter in Redis) and per-tenant concurrent-job cap.

Both refusals are 429 problem documents with Retry-After (RFC 6585 section 4; RFC 9110 section
10.2.3). The rate counter lives in Redis so every API process of a deployment shares it.
"""

from __future__ import annotations

import logging
import math
import time

import redis
from sqlalchemy import func, select

from service.access.keys import KeyIdentity
from service.config import Settings
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.store.models import Job
from worker.problems import Problem

log = logging.getLogger(__name__)
ACTIVE_STATES = ("queued", "running")
_clients: dict[str, redis.Redis] = {}


def _client(url: str) -> redis.Redis:
    client = _clients.get(url)
    if client is None:
        # Short timeouts: a slow broker must not stall every request behind the rate check.
        client = redis.Redis.from_url(url, socket_timeout=1.0, socket_connect_timeout=1.0)
        _clients[url] = client
    return client


def check_rate(runtime: Runtime, identity: KeyIdentity, now: float | None = None) -> None:
    """Count this request against its key's window; 429 once the window's allowance is spent."""
    settings = runtime.settings
    if settings.rate_limit <= 0 or not settings.broker_url.startswith(("redis://", "rediss://")):
        return
    now = time.time() if now is None else now
    window = max(1, settings.rate_window)
    index = int(now // window)
    counter = f"drawyard:rate:{identity.key_id}:{index}"
    try:
        pipeline = _client(settings.broker_url).pipeline()
        pipeline.incr(counter)
        pipeline.expire(counter, window * 2)
        count = int(pipeline.execute()[0])
    except redis.RedisError as error:
        # Without the broker no job can be queued anyway; reads stay available rather than 5xx.
        log.warning("rate limit not applied: Redis unreachable (%s)", type(error).__name__)
        return
    if count > settings.rate_limit:
        retry_after = max(1, math.ceil((index + 1) * window - now))
        raise ApiProblem(
            429,
            "rate-limited",
            "Too many requests",
            f"This key may make {settings.rate_limit} requests per {window} s; "
            f"try again in {retry_after} s.",
            headers={"Retry-After": str(retry_after)},
        )


def check_active_jobs(runtime: Runtime, tenant: str | None) -> None:
    """Refuse a new job while the tenant already has the allowed number queued or running."""
    cap = runtime.settings.max_active_jobs
    if tenant is None or cap <= 0:
        return
    with runtime.sessions() as session:
        active = session.scalar(
            select(func.count())
            .select_from(Job)
            .where(Job.tenant == tenant, Job.state.in_(ACTIVE_STATES))
        )
    if int(active or 0) >= cap:
        raise ApiProblem(
            429,
            "too-many-active-jobs",
            "Too many jobs in progress",
            f"This tenant has {active} jobs queued or running and may have at most {cap}; "
            "submit again when one finishes.",
            headers={"Retry-After": "30"},
        )


def unknown_count_problems(body: dict, settings: Settings) -> list[Problem]:
    """A problem when the model declares more scalar unknowns than DRAWYARD_MAX_UNKNOWNS.

    Called on a submission the engine has accepted, so every shape entry is a whole number or the
    name of an integer input present in the data.
    """
    model = body.get("model")
    unknowns = model.get("unknowns") if isinstance(model, dict) else None
    data = body.get("data") if isinstance(body.get("data"), dict) else {}
    total = 0
    # Also run before the engine's checks, so that a huge declared shape is refused before any
    # array of that size is built; entries that are not whole numbers are left to the engine.
    for declaration in (unknowns or {}).values() if isinstance(unknowns, dict) else ():
        shape = declaration.get("shape", []) if isinstance(declaration, dict) else []
        sizes = [entry if isinstance(entry, int) else data.get(entry, 0) if isinstance(entry, str)
                 else 0 for entry in (shape if isinstance(shape, list) else [])]
        total += math.prod(size if isinstance(size, int) and size > 0 else 0 for size in sizes)
    if total <= settings.max_unknowns:
        return []
    return [
        Problem(
            "/model/unknowns",
            f"The model has {total} scalar unknowns; this service allows at most "
            f"{settings.max_unknowns}.",
        )
    ]
