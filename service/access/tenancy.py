"""Tenant isolation: which jobs the current request may see.

The request's identity is put on ``flask.g`` by the access check. Job lookups (``load_job``,
``list_jobs``) add ``visible_jobs()`` to their WHERE clause, so another tenant's job is simply not
found (404, never 403: its existence is not revealed). Outside a request (workers, the CLI) and in
open mode there is no identity and no restriction.
"""

from __future__ import annotations

import hashlib

from flask import g, has_request_context
from sqlalchemy import ColumnElement

from service.access.keys import KeyIdentity
from service.store.models import Job

IDENTITY = "drawyard_identity"


def current_identity() -> KeyIdentity | None:
    if not has_request_context():
        return None
    return g.get(IDENTITY)


def current_tenant() -> str | None:
    identity = current_identity()
    return identity.tenant if identity is not None else None


def current_key_id() -> str | None:
    identity = current_identity()
    return identity.key_id if identity is not None else None


def visible_jobs() -> tuple[ColumnElement[bool], ...]:
    """WHERE conditions limiting jobs to the current tenant (none in open mode)."""
    tenant = current_tenant()
    return () if tenant is None else (Job.tenant == tenant,)


def scoped_idempotency_key(key: str | None) -> str | None:
    """Idempotency keys are unique per tenant: two tenants may use the same key independently.

    The stored value is a digest, so it fits the column whatever the key's length.
    """
    tenant = current_tenant()
    if key is None or tenant is None:
        return key
    return "tenant-scoped:" + hashlib.sha256(f"{tenant}\0{key}".encode()).hexdigest()
