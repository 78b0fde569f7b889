"""Alembic environment: runs on the connection service.store.migrate hands over."""

from __future__ import annotations

from alembic import context
from sqlalchemy import create_engine

from service.store.models import Base

config = context.config
target_metadata = Base.metadata


def run() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run_on(connection)
        return
    url = config.attributes.get("database_url") or config.get_main_option("sqlalchemy.url")
    engine = create_engine(url)
    with engine.begin() as fresh:
        _run_on(fresh)
    engine.dispose()


def _run_on(connection) -> None:
    # Batch mode lets later migrations alter SQLite tables (it rebuilds them).
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


if context.is_offline_mode():
    raise SystemExit("drawyard migrations run online only: use `drawyard migrate`")
run()
