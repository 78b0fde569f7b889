"""Bring a database to the newest schema with the Alembic scripts in service/migrations/."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config

MIGRATIONS = Path(__file__).resolve().parent.parent / "migrations"


def alembic_config(database_url: str) -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    # Passed as an attribute, not an ini option, so '%' in passwords needs no escaping.
    config.attributes["database_url"] = database_url
    return config


def migrate(database_url: str) -> None:
    """Upgrade the database at ``database_url`` to the newest revision (creating it if empty)."""
    from service.store.engine import make_engine

    engine = make_engine(database_url)  # creates a SQLite file's folder and sets WAL mode
    try:
        config = alembic_config(database_url)
        with engine.begin() as connection:
            config.attributes["connection"] = connection
            command.upgrade(config, "head")
    finally:
        engine.dispose()
