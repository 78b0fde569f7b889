"""Browser sign-in: a session cookie that speaks for one API key, and tokens for the pages' forms.

A browser cannot send ``Authorization: Bearer``, so the analyst pastes a key once on the sign-in
page. The server then stores a session (only the SHA-256 of its random token) bound to that key's
id and sets a cookie holding the token, signed with DRAWYARD_SESSION_SECRET (itsdangerous, the
signing library Flask itself uses). The cookie is HttpOnly (no script reads it), SameSite=Strict
(no other site's page sends it; RFC 6265bis section 5.4.7), Secure when the request came over HTTPS,
and expires with the session. Every request looks the session and its key up in the store, so
signing out, the session's expiry and the key's revocation each end it at once; a cookie replayed
after any of them finds nothing.

Forms that change state carry a token (CSRF): an HMAC of the session token when signed in; for a
browser not signed in (the sign-in form itself, and every form in open mode) a random value that
must equal the one in a second, SameSite=Strict cookie (service/web/access.py). Another site can
make a browser post a form but cannot read the token it would need (OWASP Cross-Site Request
Forgery Prevention Cheat Sheet, "Synchronizer Token Pattern" and "Double-Submit Cookie").
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from datetime import timedelta

from itsdangerous import BadSignature, URLSafeTimedSerializer
from sqlalchemy import select, update

from service.access.keys import KeyIdentity
from service.config import Settings
from service.runtime import Runtime
from service.store.access_models import ApiKey, BrowserSession
from service.store.engine import transaction
from service.store.models import utc_now

SESSION_COOKIE = "drawyard_session"
FORM_COOKIE = "drawyard_form"
FORM_FIELD = "csrf"


class SignInUnavailable(RuntimeError):
    """DRAWYARD_SESSION_SECRET is not set, so no cookie can be signed."""


def _serializer(settings: Settings, purpose: str) -> URLSafeTimedSerializer:
    if not settings.session_secret:
        raise SignInUnavailable(
            "Browser sign-in needs DRAWYARD_SESSION_SECRET (or DRAWYARD_SESSION_SECRET_FILE): a "
            "random secret shared by every API process."
        )
    return URLSafeTimedSerializer(settings.session_secret, salt=f"drawyard-{purpose}")


def session_seconds(settings: Settings) -> int:
    return max(60, int(settings.session_hours * 3600))


def _digest(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def start_session(runtime: Runtime, identity: KeyIdentity) -> str:
    """Store a new session for the key and return the cookie value that carries it."""
    settings = runtime.settings
    serializer = _serializer(settings, "session")
    token = secrets.token_urlsafe(32)
    now = utc_now()
    with transaction(runtime.sessions) as session:
        session.add(
            BrowserSession(
                token_sha256=_digest(token),
                key_id=identity.key_id,
                created_at=now,
                expires_at=now + timedelta(seconds=session_seconds(settings)),
            )
        )
    return serializer.dumps(token)


def session_token(settings: Settings, cookie: str | None) -> str | None:
    """The token inside a well-signed, unexpired cookie; None for a forged or stale one."""
    if not cookie or not settings.session_secret:
        return None
    try:
        token = _serializer(settings, "session").loads(cookie, max_age=session_seconds(settings))
    except BadSignature:
        return None
    return token if isinstance(token, str) else None


def session_identity(runtime: Runtime, token: str) -> KeyIdentity | None:
    """Whom a live session speaks for: not ended, not expired, its key not revoked."""
    with runtime.sessions() as session:
        row = session.execute(
            select(ApiKey)
            .join(BrowserSession, BrowserSession.key_id == ApiKey.id)
            .where(
                BrowserSession.token_sha256 == _digest(token),
                BrowserSession.ended_at.is_(None),
                BrowserSession.expires_at > utc_now(),
                ApiKey.revoked_at.is_(None),
            )
        ).scalar_one_or_none()
        if row is None:
            return None
        return KeyIdentity(row.id, row.tenant, frozenset(row.scopes))


def end_session(runtime: Runtime, token: str) -> None:
    with transaction(runtime.sessions) as session:
        session.execute(
            update(BrowserSession)
            .where(BrowserSession.token_sha256 == _digest(token), BrowserSession.ended_at.is_(None))
            .values(ended_at=utc_now())
            .execution_options(synchronize_session=False)
        )


def session_form_token(settings: Settings, binding: str) -> str:
    """The token a form must send back: an HMAC of the session token or per-browser value."""
    secret = settings.session_secret.encode()
    return hmac.new(secret, b"form\0" + binding.encode(), hashlib.sha256).hexdigest()


def form_token_matches(settings: Settings, binding: str | None, sent: str | None) -> bool:
    if not binding or not sent or not settings.session_secret:
        return False
    return hmac.compare_digest(session_form_token(settings, binding), sent)
