"""The query parameters every paginated listing shares (jobs, models, model versions)."""

from __future__ import annotations

from flask import request

from service.job_queries import bad_parameter
from service.views.context import runtime


def requested_limit() -> int:
    """The page size asked for in ``?limit=``, within the deployment's bounds; a 400 otherwise."""
    settings = runtime().settings
    raw = request.args.get("limit")
    try:
        limit = settings.page_limit if raw is None else int(raw)
    except ValueError as error:
        raise bad_parameter("limit", "The limit is a whole number.") from error
    if not 1 <= limit <= settings.max_page_limit:
        raise bad_parameter("limit", f"The limit is between 1 and {settings.max_page_limit}.")
    return limit
