"""Web pages for analysts: list jobs, submit one, watch it run and read its results; the
documentation."""

from service.web import (  # noqa: F401  (they add their routes to the blueprint)
    docs_pages,
    pages,
    plot_views,
    sign_in,
)
from service.web.blueprint import web

__all__ = ["web"]
