"""What a process of the service holds: its settings, database engine, sessions and Celery app."""

from __future__ import annotations

from dataclasses import dataclass

from celery import Celery
from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.store.engine import make_engine, make_sessions


@dataclass
class Runtime:
    settings: Settings
    engine: Engine
    sessions: sessionmaker[Session]
    celery: Celery

    def close(self) -> None:
        self.engine.dispose()


def build_runtime(settings: Settings, celery: Celery | None = None) -> Runtime:
    from worker.celery_app import make_celery

    engine = make_engine(settings.database_url)
    return Runtime(settings, engine, make_sessions(engine), celery or make_celery(settings))
