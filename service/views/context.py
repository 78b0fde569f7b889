"""What a view needs from the app: the runtime attached by the factory."""

from __future__ import annotations

from flask import current_app

from service.runtime import Runtime


def runtime() -> Runtime:
    return current_app.extensions["drawyard"]
