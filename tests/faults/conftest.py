"""Fixtures of the fault tests: a fresh, migrated SQLite store per test."""

from __future__ import annotations

from pathlib import Path

import pytest

from service.store import migrate


@pytest.fixture
def sqlite_store(tmp_path: Path) -> str:
    url = f"sqlite:///{(tmp_path / 'faults.sqlite').resolve()}"
    migrate(url)
    return url
