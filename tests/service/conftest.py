"""Fixtures of the service tests: an app on a real store and a real Redis broker."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
import redis
from flask import Flask

from service.app import create_app
from service.store import migrate
from tests.service.store_probe import QueueProbe


@pytest.fixture
def sqlite_store(tmp_path: Path) -> str:
    url = f"sqlite:///{(tmp_path / 'views.sqlite').resolve()}"
    migrate(url)
    return url


@pytest.fixture(params=["sqlite", "postgresql"])
def unmigrated_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """An empty store on each backend, not yet migrated: for upgrade tests from older revisions."""
    if request.param == "sqlite":
        return f"sqlite:///{(tmp_path / 'old.sqlite').resolve()}"
    return request.getfixturevalue("fresh_postgres_url")


@pytest.fixture
def app(sqlite_store: str, redis_url: str) -> Iterator[Flask]:
    app = create_app(
        {
            "database_url": sqlite_store,
            "broker_url": redis_url,
            "max_body_bytes": 20_000,
            "max_chains": 8,
            "max_draws": 5_000,
            "page_limit": 3,
        }
    )
    yield app
    app.extensions["drawyard"].close()


@pytest.fixture
def queue(app: Flask, redis_url: str) -> QueueProbe:
    return QueueProbe(redis.Redis.from_url(redis_url), app.extensions["drawyard"].settings.queue)
