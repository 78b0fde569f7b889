"""Sign-in and sign-out pages: a pasted API key becomes a browser session (browser_sessions)."""

from __future__ import annotations

from flask import g, redirect, render_template, request, url_for
from werkzeug.wrappers import Response

from service.access.authentication import SESSION_TOKEN
from service.access.browser_sessions import (
    SESSION_COOKIE,
    SignInUnavailable,
    end_session,
    session_seconds,
    session_token,
    start_session,
)
from service.access.keys import keys_configured, verify_key
from service.views.context import runtime
from service.web.access import local_path
from service.web.blueprint import web


def _open_mode() -> bool:
    settings = runtime().settings
    return not settings.require_keys and not keys_configured(runtime().sessions)


def _page(problem: str | None = None, status: int = 200) -> tuple[str, int]:
    page = render_template(
        "sign_in.html", problem=problem, open_mode=_open_mode(),
        next_path=local_path(request.values.get("next")),
        available=bool(runtime().settings.session_secret),
    )
    return page, status


@web.get("/sign-in")
def sign_in_page() -> tuple[str, int]:
    return _page()


@web.post("/sign-in")
def sign_in() -> tuple[str, int] | Response:
    key = request.form.get("key", "").strip()
    identity = verify_key(runtime().sessions, key) if key else None
    if identity is None:
        return _page("That key is not valid or has been revoked.", 401)
    try:
        cookie = start_session(runtime(), identity)
    except SignInUnavailable as error:
        return _page(str(error), 503)
    response = redirect(local_path(request.form.get("next")), 303)
    response.set_cookie(
        SESSION_COOKIE, cookie, max_age=session_seconds(runtime().settings), httponly=True,
        samesite="Strict", secure=request.is_secure, path="/",
    )
    return response


@web.post("/sign-out")
def sign_out() -> Response:
    # The access check ran (this is not a public page), so a live session's token is on g.
    token = g.get(SESSION_TOKEN) or session_token(
        runtime().settings, request.cookies.get(SESSION_COOKIE)
    )
    if token:
        end_session(runtime(), token)
    response = redirect(url_for("web.sign_in_page"), 303)
    response.delete_cookie(SESSION_COOKIE, path="/", httponly=True, samesite="Strict",
                           secure=request.is_secure)
    return response

