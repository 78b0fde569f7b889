"""Tables of access control: API keys, each belonging to a tenant and holding scopes."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import JSON, String
from sqlalchemy.orm import Mapped, mapped_column

from service.store.models import Base, UtcDateTime


class ApiKey(Base):
    """One API key. The secret itself is never stored: only the SHA-256 of the whole key."""

    __tablename__ = "api_keys"

    # The public part of the key ("dyk_<id>.<secret>"): it names the key in logs and audits.
    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    tenant: Mapped[str] = mapped_column(String(64), index=True)
    scopes: Mapped[list[str]] = mapped_column(JSON)
    secret_sha256: Mapped[str] = mapped_column(String(64))
    label: Mapped[str | None] = mapped_column(String(255))
    created_at: Mapped[datetime] = mapped_column(UtcDateTime)
    revoked_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
