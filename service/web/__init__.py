"""Web pages for analysts: list jobs, submit one, watch it run and read its results."""

from service.web import pages, plot_views, sign_in  # noqa: F401  (they add their routes to the blueprint)
from service.web.blueprint import web

__all__ = ["web"]
