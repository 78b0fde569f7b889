"""API keys: create, revoke, list and verify. Only a SHA-256 of each key is ever stored.

A key reads ``dyk_<id>.<secret>``: the id finds the row (and names the key in audits and logs),
the secret is 32 random bytes from the operating system and is shown once, when it is made.
"""

from __future__ import annotations

import hashlib
import hmac
import logging
import re
import secrets
from collections.abc import Iterable
from dataclasses import dataclass

from sqlalchemy import select, update
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session, sessionmaker

from service.store.access_models import ApiKey
from service.store.engine import transaction
from service.store.models import utc_now

# "metrics" lets a scraper read /metrics and nothing else (a key for the monitoring system).
SCOPES = ("submit", "read", "metrics")
KEY_PREFIX = "dyk_"
KEY_PATTERN = re.compile(r"^dyk_([0-9a-f]{16})\.([A-Za-z0-9_-]{43})$")
TENANT_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
# Compared against when no row matches, so an unknown id costs the same work as a wrong secret.
_ABSENT_HASH = hashlib.sha256(b"no such key").hexdigest()


@dataclass(frozen=True)
class KeyIdentity:
    """Who a verified request speaks for."""

    key_id: str
    tenant: str
    scopes: frozenset[str]


@dataclass(frozen=True)
class NewKey:
    key_id: str
    tenant: str
    scopes: tuple[str, ...]
    secret: str  # the whole key; shown once, stored nowhere


def hash_key(key: str) -> str:
    return hashlib.sha256(key.encode()).hexdigest()


def parse_scopes(raw: str | Iterable[str]) -> tuple[str, ...]:
    """Scopes from "submit,read" (or a list); ValueError naming the valid ones otherwise."""
    names = raw.split(",") if isinstance(raw, str) else list(raw)
    chosen = tuple(dict.fromkeys(name.strip() for name in names if name.strip()))
    unknown = [name for name in chosen if name not in SCOPES]
    if unknown or not chosen:
        what = f"unknown scope {unknown[0]!r}" if unknown else "no scope given"
        raise ValueError(f"{what}; the scopes are {', '.join(SCOPES)}")
    return chosen


def create_key(
    sessions: sessionmaker[Session], tenant: str, scopes: Iterable[str], label: str | None = None
) -> NewKey:
    if not TENANT_PATTERN.fullmatch(tenant):
        raise ValueError(
            "a tenant name is 1 to 64 letters, digits, '.', '_' or '-', starting with a letter "
            "or digit"
        )
    chosen = parse_scopes(scopes)
    key_id = secrets.token_hex(8)
    secret = f"{KEY_PREFIX}{key_id}.{secrets.token_urlsafe(32)}"
    with transaction(sessions) as session:
        session.add(
            ApiKey(
                id=key_id,
                tenant=tenant,
                scopes=list(chosen),
                secret_sha256=hash_key(secret),
                label=label,
                created_at=utc_now(),
            )
        )
    return NewKey(key_id, tenant, chosen, secret)


def revoke_key(sessions: sessionmaker[Session], key_id: str) -> bool:
    """Mark a key revoked; False when there is no such key or it was revoked already."""
    with transaction(sessions) as session:
        changed = session.execute(
            update(ApiKey)
            .where(ApiKey.id == key_id, ApiKey.revoked_at.is_(None))
            .values(revoked_at=utc_now())
            .execution_options(synchronize_session=False)
        ).rowcount
    return bool(changed)


def list_keys(sessions: sessionmaker[Session]) -> list[ApiKey]:
    with sessions() as session:
        return list(session.scalars(select(ApiKey).order_by(ApiKey.created_at)).all())


def keys_configured(sessions: sessionmaker[Session]) -> bool:
    """Whether any key was ever made. Revoking every key does not reopen the service."""
    try:
        with sessions() as session:
            return session.scalar(select(ApiKey.id).limit(1)) is not None
    except SQLAlchemyError:
        # A store not yet migrated has no keys table; the start-up warning then says "open".
        logging.getLogger(__name__).debug("keys table not readable", exc_info=True)
        return False


def verify_key(sessions: sessionmaker[Session], presented: str) -> KeyIdentity | None:
    """The identity of a valid, unrevoked key, or None."""
    match = KEY_PATTERN.match(presented)
    key_id = match.group(1) if match else ""
    with sessions() as session:
        row = session.get(ApiKey, key_id) if match else None
        stored = row.secret_sha256 if row is not None else _ABSENT_HASH
        # Constant-time comparison of the digests: timing reveals nothing about the stored hash.
        same = hmac.compare_digest(stored.encode(), hash_key(presented).encode())
        if row is None or not same or row.revoked_at is not None:
            return None
        return KeyIdentity(row.id, row.tenant, frozenset(row.scopes))
