"""Looking at the store and the broker directly, to check what the API did or did not do."""

from __future__ import annotations

import json
import uuid
from typing import Any

import redis
from alembic import command
from flask import Flask
from sqlalchemy import func, select, text

from service.store.engine import make_engine
from service.store.migrate import alembic_config
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


def newest_revision(url: str) -> str:
    """The head revision of service/migrations, which `migrate` upgrades to."""
    from alembic.script import ScriptDirectory

    return str(ScriptDirectory.from_config(alembic_config(url)).get_current_head())


def store_at_revision_with_a_job(url: str, revision: str) -> str:
    """An empty store migrated only up to ``revision`` and holding one succeeded job, written as
    a service of that revision would have (raw SQL: today's models know newer columns); returns
    the job's id, for upgrade tests that check old rows survive."""
    engine = make_engine(url)
    config = alembic_config(url)
    with engine.begin() as connection:
        config.attributes["connection"] = connection
        command.upgrade(config, revision)
    job_id = uuid.uuid4().hex
    with engine.begin() as connection:
        connection.execute(
            text(
                "INSERT INTO jobs (id, state, created_at, chain_count, seed, body, settings, "
                "labels, request_sha256, spec_sha256, data_sha256, api_software) VALUES "
                "(:id, 'succeeded', CURRENT_TIMESTAMP, 1, 5, :body, '{}', '{}', :h, :h, :h, '{}')"
            ),
            {"id": job_id, "body": json.dumps({"model": {}}), "h": "0" * 64},
        )
    engine.dispose()
    return job_id
