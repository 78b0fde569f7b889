"""The request check: ``Authorization: Bearer <key>`` or a browser session, its scope, its rate.

Registered before every view of the API blueprints that touch jobs and of ``/metrics`` (scope
``metrics``), and as ``app.extensions["drawyard.access_check"]`` for the web pages. Health and the
OpenAPI document stay open so that load balancers and clients can reach them without a key.

A signed-in browser (service/access/browser_sessions.py) speaks for its key on the pages and may
read through the API (the job page polls it, downloads are API links); an API request that changes
state needs the key itself, since only the pages' forms carry a token against cross-site forgery.

Open mode: until the first key is created (and unless DRAWYARD_REQUIRE_KEYS=1) every request is
let through without an identity, as before keys existed; the app logs a warning at start-up.
"""

from __future__ import annotations

import logging

from flask import Blueprint, Flask, Request, g, request

from service.access.browser_sessions import SESSION_COOKIE, session_identity, session_token
from service.access.keys import KeyIdentity, keys_configured, verify_key
from service.access.limits import (
    check_failed_authentications,
    check_rate,
    count_failed_authentication,
)
from service.access.redaction import install_redaction
from service.access.tenancy import IDENTITY
from service.problem_details import ApiProblem
from service.runtime import Runtime

log = logging.getLogger(__name__)
ACCESS_CHECK = "drawyard.access_check"
# flask.g: the browser session's token when the request came with one (the pages' forms use it).
SESSION_TOKEN = "drawyard_session_token"
WEB_BLUEPRINT = "web"
METRICS_BLUEPRINT = "metrics"
# Statuses the access check may answer on any guarded path (the OpenAPI document lists them).
ACCESS_STATUSES = (401, 403, 429)
READ_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
# RFC 6750 section 3: a 401 for a bearer-protected resource names the scheme.
CHALLENGE = {"WWW-Authenticate": 'Bearer realm="drawyard"'}
OPEN_WARNING = (
    "NO API KEYS ARE CONFIGURED: this drawyard is OPEN to anyone who can reach it. Create a key "
    "with `drawyard keys create --tenant NAME --scopes submit,read`, or set "
    "DRAWYARD_REQUIRE_KEYS=1."
)


def needed_scope(request: Request) -> str:
    if request.blueprint == METRICS_BLUEPRINT:
        return "metrics"
    return "read" if request.method in READ_METHODS else "submit"


def unauthorised(detail: str) -> ApiProblem:
    return ApiProblem(401, "unauthorised", "A valid API key is needed", detail, headers=CHALLENGE)


def presented_key(request: Request) -> str | None:
    header = request.headers.get("Authorization")
    if header is None:
        return None
    scheme, _, token = header.strip().partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise unauthorised("The Authorization header must read 'Bearer <key>'.")
    return token.strip()


def authenticate(runtime: Runtime, request: Request) -> KeyIdentity | None:
    """The caller's identity (None in open mode); ApiProblem 401, 403 or 429 to refuse."""
    if not runtime.settings.require_keys and not keys_configured(runtime.sessions):
        return None
    address = request.remote_addr
    check_failed_authentications(runtime, address)
    try:
        key = presented_key(request)
    except ApiProblem:
        count_failed_authentication(runtime, address)
        raise
    if key is None:
        identity = browser_identity(runtime, request)
    else:
        identity = verify_key(runtime.sessions, key)
        if identity is None:
            count_failed_authentication(runtime, address)
            raise unauthorised("The API key is not valid or has been revoked.")
    scope = needed_scope(request)
    if scope not in identity.scopes:
        raise ApiProblem(
            403,
            "missing-scope",
            "The key lacks a scope",
            f"This request needs the '{scope}' scope; key {identity.key_id} has "
            f"{', '.join(sorted(identity.scopes))}.",
        )
    check_rate(runtime, identity)
    return identity


def browser_identity(runtime: Runtime, request: Request) -> KeyIdentity:
    """The key a browser session speaks for; 401 without a live one."""
    token = session_token(runtime.settings, request.cookies.get(SESSION_COOKIE))
    if token is None:
        raise unauthorised(
            "Send an API key as 'Authorization: Bearer <key>', or sign in on the web pages."
        )
    if request.blueprint != WEB_BLUEPRINT and request.method not in READ_METHODS:
        raise unauthorised(
            "A signed-in browser may only read through the API; send the key itself to change "
            "anything, or use the pages' forms."
        )
    identity = session_identity(runtime, token)
    if identity is None:
        raise unauthorised(
            "The browser session has ended (signed out, expired, or its key revoked); sign in "
            "again."
        )
    setattr(g, SESSION_TOKEN, token)
    return identity


def install_access(app: Flask, runtime: Runtime, blueprints: tuple[Blueprint, ...]) -> None:
    """Guard the given blueprints and the web pages; warn when the service is open."""
    install_redaction()
    guarded = frozenset(blueprint.name for blueprint in blueprints)

    def check(request: Request) -> None:
        # Once per request, so a page that checks again is not counted twice against the rate.
        if IDENTITY not in g:
            setattr(g, IDENTITY, authenticate(runtime, request))

    # On the app rather than the blueprints: blueprints are module globals shared by every app
    # built in one process, and each app must check against its own store.
    @app.before_request
    def guard() -> None:
        if request.blueprint in guarded:
            check(request)

    app.extensions[ACCESS_CHECK] = check
    if runtime.settings.require_keys:
        log.info("API keys are required (DRAWYARD_REQUIRE_KEYS=1)")
    elif not keys_configured(runtime.sessions):
        log.warning(OPEN_WARNING)
