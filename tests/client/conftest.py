"""One real service (gunicorn, two Celery workers, Redis, SQLite) shared by this module's tests.

Starting the stack takes seconds; the end-to-end tests share one so the directory stays quick.
Jobs are told apart by their ids and labels, never by counting everything in the store.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from service.local_stack import RedisServer
from service.store import migrate
from tests.harness.live_service import LiveService, start_live_service


@pytest.fixture(scope="module")
def shared_service(
    redis_server: RedisServer, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[LiveService]:
    folder = tmp_path_factory.mktemp("client-service")
    database_url = f"sqlite:///{(folder / 'store.sqlite').resolve()}"
    migrate(database_url)
    redis_server.flush()
    # Progress written every 0.2 s, so a cancel reaches a running chain quickly.
    service = start_live_service(
        database_url,
        redis_server.url,
        workers=2,
        env={"DRAWYARD_PROGRESS_INTERVAL": "0.2"},
        log_dir=Path(folder) / "logs",
    )
    yield service
    service.stop()
