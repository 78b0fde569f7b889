"""Who may use the web pages: the same check as the JSON API, applied before every page.

The API has no keys yet (issue 5). When it gets them, the app factory puts its checker in
``app.extensions[ACCESS_CHECK]``: a callable taking the request that raises ``ApiProblem`` (401,
403) to refuse it. The pages call that same checker before every view, and they read and write
jobs only through the functions the API views call (``get_job``, ``list_jobs``, ``submit``,
``cancel_job``), so tenant isolation added there applies to the pages as well.
"""

from __future__ import annotations

from flask import current_app, request

ACCESS_CHECK = "drawyard.access_check"


def check_access() -> None:
    checker = current_app.extensions.get(ACCESS_CHECK)
    if checker is not None:
        checker(request)
