"""Shared fixtures: private Redis and PostgreSQL servers, store URLs, and the live service.

Servers are started once per session on free loopback ports and stopped by fixture finalisers;
service/local_stack.py also stops any child still running at interpreter exit, and every child
gets SIGTERM from the kernel if this process dies without cleaning up.
"""

import sys
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path

import pytest

# `tests` is not an installed package; pytest run as a console script (not `python -m pytest`) does
# not put the repository root on sys.path, and the harness is imported as `tests.harness`.
REPO_ROOT = Path(__file__).resolve().parent.parent
if str(REPO_ROOT) not in sys.path:
    sys.path.insert(0, str(REPO_ROOT))

from service.local_stack import RedisServer, redis_installed  # noqa: E402
from tests.harness.live_service import LiveService, start_live_service  # noqa: E402
from tests.harness.postgres import PostgresServer, find_postgres_bin  # noqa: E402

SERVER_FIXTURES = {"redis_server", "postgres_server", "database_url", "live_service", "redis_url"}

INSTALL_HINT = "run `bash tests/harness/install_services.sh` (make test does) to install it"


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    # Tests that need real servers are marked so that `-m "not services"` gives a quick engine run.
    for item in items:
        if SERVER_FIXTURES.intersection(getattr(item, "fixturenames", ())):
            item.add_marker(pytest.mark.services)


def pytest_sessionfinish(session: pytest.Session, exitstatus: int) -> None:
    # A run in which nothing passed (everything skipped or deselected) must not look green in CI;
    # pytest itself already fails a run that collected nothing.
    reporter = session.config.pluginmanager.get_plugin("terminalreporter")
    passed = len(reporter.stats.get("passed", [])) if reporter is not None else 1
    if exitstatus == pytest.ExitCode.OK and passed == 0:
        session.exitstatus = pytest.ExitCode.NO_TESTS_COLLECTED


@pytest.fixture(scope="session")
def redis_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[RedisServer]:
    """A private redis-server (no persistence) for the whole session; `.url`, `.port`,
    `.flush()`, `.restart()` and `.stop()`/`.start()` for fault tests."""
    if not redis_installed():
        pytest.fail(f"redis-server is not installed; {INSTALL_HINT}")
    server = RedisServer(tmp_path_factory.mktemp("redis")).start()
    yield server
    server.stop()


@pytest.fixture
def redis_url(redis_server: RedisServer) -> str:
    """The session's Redis, emptied for this test (and restarted first if a test stopped it)."""
    if server_down(redis_server):
        redis_server.start()
    redis_server.flush()
    return redis_server.url


def server_down(server: RedisServer) -> bool:
    return server.child is None or not server.child.alive()


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[PostgresServer]:
    """A private PostgreSQL cluster (trust auth on 127.0.0.1); `.url` is the `postgres` database,
    `.create_database()` returns the URL of a new empty one."""
    if find_postgres_bin() is None:
        pytest.fail(f"PostgreSQL is not installed; {INSTALL_HINT}")
    server = PostgresServer().start()
    yield server
    server.stop()


@pytest.fixture
def fresh_postgres_url(postgres_server: PostgresServer) -> str:
    """A new, empty, unmigrated PostgreSQL database for this test."""
    return postgres_server.create_database()


def sqlite_url(path: Path) -> str:
    return f"sqlite:///{path.resolve()}"


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A fresh, migrated store: a SQLite file in tmp_path, or a new PostgreSQL database."""
    from service.store import migrate

    if request.param == "sqlite":
        url = sqlite_url(tmp_path / "store.sqlite")
    else:
        url = request.getfixturevalue("postgres_server").create_database()
    migrate(url)
    return url


@pytest.fixture
def live_service(tmp_path: Path) -> Iterator[Callable[..., LiveService]]:
    """A factory: live_service(database_url, broker_url, workers=1, env=None) starts gunicorn and
    real Celery workers, waits until they are ready, and everything is stopped after the test."""
    started: list[LiveService] = []

    def start(
        database_url: str,
        broker_url: str,
        workers: int = 1,
        env: Mapping[str, str] | None = None,
    ) -> LiveService:
        log_dir = tmp_path / f"service{len(started)}"
        service = start_live_service(database_url, broker_url, workers, env, log_dir)
        started.append(service)
        return service

    yield start
    for service in reversed(started):
        service.stop()
