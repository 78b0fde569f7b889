"""What a process of the service holds: its settings, database engine, sessions and Celery app."""

from __future__ import annotations

from dataclasses import dataclass, field

from celery import Celery
from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.store.engine import make_engine, make_sessions
from worker.model_cache import CompiledModels


@dataclass
class Runtime:
    settings: Settings
    engine: Engine
    sessions: sessionmaker[Session]
    celery: Celery
    # compiled models kept between the chains this process runs (empty in API processes)
    models: CompiledModels = field(default_factory=lambda: CompiledModels(0))

    def close(self) -> None:
        self.engine.dispose()


def build_runtime(settings: Settings, celery: Celery | None = None) -> Runtime:
    from worker.celery_app import make_celery

    engine = make_engine(settings.database_url)
    models = CompiledModels(settings.model_cache_mb * 2**20)
    return Runtime(settings, engine, make_sessions(engine), celery or make_celery(settings), models)
