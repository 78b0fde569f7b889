"""Per-key request rate, failed authentications per client address, and the per-tenant job cap.

The rates are sliding windows: every request of the last `window` seconds counts, whenever it came
(the moving-window strategy of the `limits` library, one sorted entry per request in Redis), so a
burst across a clock boundary cannot reach twice the limit as it could with fixed windows. They
live in Redis so every API process of a deployment shares them. Refusals are 429 problem
documents with Retry-After (RFC 6585 section 4; RFC 9110 section 10.2.3).
"""

from __future__ import annotations

import logging
import math
import time

import redis
from limits import RateLimitItem, RateLimitItemPerSecond
from limits.storage import RedisStorage
from limits.strategies import MovingWindowRateLimiter
from sqlalchemy import func, select

from service.access.keys import KeyIdentity
from service.config import Settings
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.store.models import Job
from worker.problems import Problem

log = logging.getLogger(__name__)
ACTIVE_STATES = ("queued", "running")
_limiters: dict[str, MovingWindowRateLimiter] = {}


def _limiter(url: str) -> MovingWindowRateLimiter:
    limiter = _limiters.get(url)
    if limiter is None:
        # Short timeouts: a slow broker must not stall every request behind the rate check.
        storage = RedisStorage(url, key_prefix="drawyard:rate", socket_timeout=1.0,
                               socket_connect_timeout=1.0)
        limiter = MovingWindowRateLimiter(storage)
        _limiters[url] = limiter
    return limiter


def _counted(settings: Settings) -> bool:
    return settings.broker_url.startswith(("redis://", "rediss://"))


def _retry_after(limiter: MovingWindowRateLimiter, item: RateLimitItem, *names: str) -> int:
    """Seconds until the oldest request in the window leaves it (at least one)."""
    reset = limiter.get_window_stats(item, *names).reset_time
    return max(1, math.ceil(reset - time.time()))


def check_rate(runtime: Runtime, identity: KeyIdentity) -> None:
    """Count this request against its key's sliding window; 429 once the window is full."""
    settings = runtime.settings
    if settings.rate_limit <= 0 or not _counted(settings):
        return
    window = max(1, settings.rate_window)
    item = RateLimitItemPerSecond(settings.rate_limit, window)
    limiter = _limiter(settings.broker_url)
    try:
        if limiter.hit(item, "key", identity.key_id):
            return
        retry_after = _retry_after(limiter, item, "key", identity.key_id)
    except redis.RedisError as error:
        # Without the broker no job can be queued anyway; reads stay available rather than 5xx.
        log.warning("rate limit not applied: Redis unreachable (%s)", type(error).__name__)
        return
    raise ApiProblem(
        429,
        "rate-limited",
        "Too many requests",
        f"This key may make {settings.rate_limit} requests in any {window} s; "
        f"try again in {retry_after} s.",
        headers={"Retry-After": str(retry_after)},
    )


def _failure_item(settings: Settings) -> RateLimitItem:
    return RateLimitItemPerSecond(settings.auth_failure_limit, max(1, settings.auth_failure_window))


def check_failed_authentications(runtime: Runtime, address: str | None) -> None:
    """429 while ``address`` has used up its allowance of failed authentications."""
    settings = runtime.settings
    if settings.auth_failure_limit <= 0 or not _counted(settings):
        return
    item, limiter, where = _failure_item(settings), _limiter(settings.broker_url), address or "-"
    try:
        if limiter.test(item, "auth-failures", where):
            return
        retry_after = _retry_after(limiter, item, "auth-failures", where)
    except redis.RedisError as error:
        log.warning("failed-authentication limit not applied: Redis unreachable (%s)",
                    type(error).__name__)
        return
    raise ApiProblem(
        429,
        "too-many-failed-authentications",
        "Too many failed authentications",
        f"This address sent {settings.auth_failure_limit} invalid keys in the last "
        f"{item.get_expiry()} s; try again in {retry_after} s.",
        headers={"Retry-After": str(retry_after)},
    )


def count_failed_authentication(runtime: Runtime, address: str | None) -> None:
    """Record one failed authentication from ``address``."""
    settings = runtime.settings
    if settings.auth_failure_limit <= 0 or not _counted(settings):
        return
    try:
        _limiter(settings.broker_url).hit(_failure_item(settings), "auth-failures", address or "-")
    except redis.RedisError as error:
        log.warning("failed authentication not counted: Redis unreachable (%s)",
                    type(error).__name__)


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
