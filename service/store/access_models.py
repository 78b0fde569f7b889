"""Tables of access control: API keys (each of a tenant, with scopes) and browser sessions."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import JSON, ForeignKey, String
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



class BrowserSession(Base):
    """A signed-in browser (service/access/browser_sessions.py), speaking for one API key.

    Only a SHA-256 of the session's random token is stored, as for keys. The key's revocation ends
    the session too, because every request looks the key up again.
    """

    __tablename__ = "browser_sessions"

    token_sha256: Mapped[str] = mapped_column(String(64), primary_key=True)
    key_id: Mapped[str] = mapped_column(String(32), ForeignKey("api_keys.id"), index=True)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime)
    expires_at: Mapped[datetime] = mapped_column(UtcDateTime)
    # Set by sign-out: the same cookie, replayed afterwards, finds an ended session.
    ended_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
