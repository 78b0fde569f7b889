"""Who may use the web pages, and which forms they may send.

The app factory puts the API's checker in ``app.extensions[ACCESS_CHECK]``: a callable taking the
request that raises ``ApiProblem`` (401, 403, 429) to refuse it. It accepts a bearer key or the
browser session cookie (service/access/browser_sessions.py). The pages call it before every view
but the sign-in page; a browser that is not signed in is sent there. Pages read and write jobs only
through the functions the API views call (``get_job``, ``list_jobs``, ``submit``, ``cancel_job``),
so tenant isolation applies to them as well.

Every form that changes state carries a token (CSRF, see browser_sessions): bound to the session
when signed in, else to a random value in a SameSite=Strict cookie, which another site can neither
read nor set (OWASP Cross-Site Request Forgery Prevention Cheat Sheet, "Double-Submit Cookie").
A request with a bearer key needs none: a browser never adds that header to another site's form.
"""

from __future__ import annotations

import hmac
import secrets
from urllib.parse import urlsplit

from flask import Response, current_app, g, redirect, request, url_for

from service.access.authentication import READ_METHODS, SESSION_TOKEN
from service.access.browser_sessions import (
    FORM_COOKIE,
    FORM_FIELD,
    SESSION_COOKIE,
    form_token_matches,
    session_form_token,
    session_token,
)
from service.problem_details import ApiProblem
from service.views.context import runtime

ACCESS_CHECK = "drawyard.access_check"
# Pages a browser that is not signed in may open.
PUBLIC_ENDPOINTS = frozenset({"web.sign_in_page", "web.sign_in", "web.static"})
# flask.g: a per-browser form value made during this request, to be set as a cookie afterwards.
NEW_FORM_VALUE = "drawyard_new_form_value"


def check_access() -> Response | None:
    checker = current_app.extensions.get(ACCESS_CHECK)
    if checker is not None and request.endpoint not in PUBLIC_ENDPOINTS:
        try:
            checker(request)
        except ApiProblem as problem:
            if problem.status == 401 and request.method in READ_METHODS:
                target = local_path(request.full_path)
                return redirect(url_for("web.sign_in_page", next=target), 303)
            raise
    if request.method not in READ_METHODS:
        check_form()
    return None


def local_path(target: str | None) -> str:
    """A path on this site to return to after signing in; anything else is the jobs list."""
    parts = urlsplit(target or "")
    if not target or parts.scheme or parts.netloc or not target.startswith("/"):
        return url_for("web.jobs_page")
    # "/\\host" is read by some browsers as another host.
    if target.startswith(("//", "/\\")):
        return url_for("web.jobs_page")
    return target.rstrip("?")


def form_binding() -> str:
    """What this browser's form tokens are bound to: its session, else its form cookie."""
    token = g.get(SESSION_TOKEN)
    if token:
        return token
    existing = request.cookies.get(FORM_COOKIE)
    if existing and len(existing) >= 32:
        return existing
    made = g.get(NEW_FORM_VALUE)
    if made is None:
        made = secrets.token_urlsafe(32)
        setattr(g, NEW_FORM_VALUE, made)
    return made


def form_token() -> str:
    """The hidden field every state-changing form carries (a template global)."""
    binding = form_binding()
    if g.get(SESSION_TOKEN):
        return session_form_token(runtime().settings, binding)
    return binding


def forged() -> ApiProblem:
    return ApiProblem(
        403,
        "form-token",
        "The form could not be checked",
        "The form did not come from this site's page, or the page is older than the session; "
        "reload the page and send the form again.",
    )


def check_form() -> None:
    """Refuse a state-changing request from another site: wrong Origin, missing or wrong token."""
    origin = request.headers.get("Origin")
    if origin and origin != "null" and origin != request.host_url.rstrip("/"):
        raise forged()
    if request.headers.get("Authorization"):
        return
    sent = request.form.get(FORM_FIELD)
    # The sign-in form is rendered without the session (it is public), so it is bound to the form
    # cookie even in a browser that still holds a session cookie.
    if request.endpoint not in PUBLIC_ENDPOINTS:
        signed_in = session_token(runtime().settings, request.cookies.get(SESSION_COOKIE))
        if signed_in is not None:
            if not form_token_matches(runtime().settings, signed_in, sent):
                raise forged()
            return
    cookie = request.cookies.get(FORM_COOKIE)
    if not cookie or not sent or len(cookie) < 32 or not hmac.compare_digest(cookie, sent):
        raise forged()


def set_form_cookie(response: Response) -> Response:
    """After a page that made a per-browser form value: keep it in the browser."""
    made = g.get(NEW_FORM_VALUE)
    if made is not None:
        response.set_cookie(
            FORM_COOKIE, made, httponly=True, samesite="Strict", secure=request.is_secure,
            path="/",
        )
    return response
