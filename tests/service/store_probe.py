"""Looking at the store and the broker directly, to check what the API did or did not do."""

from __future__ import annotations

from typing import Any

import redis
from flask import Flask
from sqlalchemy import func, select

from service.store.models import Chain, Event, Job


class QueueProbe:
    """Reads the broker's queue straight from Redis: the kombu Redis transport keeps a queue's
    messages in a Redis list named after the queue (LLEN gives its length)."""

    def __init__(self, client: redis.Redis, name: str):
        self.client, self.name = client, name

    def length(self) -> int:
        return int(self.client.llen(self.name))


def row_counts(app: Flask) -> dict[str, int]:
    runtime = app.extensions["drawyard"]
    with runtime.sessions() as session:
        return {
            table.__tablename__: session.scalar(select(func.count()).select_from(table))
            for table in (Job, Chain, Event)
        }


def settings_of(app: Flask) -> Any:
    return app.extensions["drawyard"].settings
