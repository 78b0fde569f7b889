"""The harness's private servers really start, answer, and go away when stopped.

Expected replies are those documented by the servers themselves: Redis answers PING with PONG
(Redis command reference, PING); PostgreSQL evaluates `SELECT 1` to the integer 1 and reports its
major version in `server_version_num` (PostgreSQL 15 documentation, ch. 20 "Server Configuration",
preset options).
"""

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import psycopg
import pytest
import redis
import sqlalchemy as sa

from service.local_stack import RedisServer, free_port, start_child
from tests.harness.postgres import PostgresServer
from tests.harness.processes import pid_gone


def test_redis_answers_ping_and_stores(redis_server: RedisServer) -> None:
    client = redis.Redis.from_url(redis_server.url)
    assert client.ping() is True
    client.set("harness-check", "1")
    assert client.get("harness-check") == b"1"
    assert redis_server.url == f"redis://127.0.0.1:{redis_server.port}/0"


def test_redis_flush_and_restart_keep_the_port(tmp_path: Path) -> None:
    server = RedisServer(tmp_path / "r").start()
    try:
        client = redis.Redis(port=server.port)
        client.set("k", "v")
        server.flush()
        assert client.get("k") is None
        client.set("k", "v")
        port, old_pid = server.port, server.child.pid
        server.restart()
        assert server.port == port and server.child.pid != old_pid
        assert pid_gone(old_pid)
        # No persistence was configured, so a restart loses everything.
        assert redis.Redis(port=port).get("k") is None
    finally:
        server.stop()
    with pytest.raises(redis.ConnectionError):
        redis.Redis(port=port, socket_connect_timeout=1).ping()


def test_postgres_answers_select_one(postgres_server: PostgresServer) -> None:
    engine = sa.create_engine(postgres_server.url)
    try:
        with engine.connect() as conn:
            assert conn.execute(sa.text("SELECT 1")).scalar_one() == 1
            version = int(conn.execute(sa.text("SHOW server_version_num")).scalar_one())
        assert version >= 150000
    finally:
        engine.dispose()


def test_postgres_fresh_databases_are_separate(postgres_server: PostgresServer) -> None:
    first, second = postgres_server.create_database(), postgres_server.create_database()
    assert first != second
    engines = [sa.create_engine(first), sa.create_engine(second)]
    try:
        with engines[0].begin() as conn:
            conn.execute(sa.text("CREATE TABLE only_here (x int)"))
        with engines[1].connect() as conn:
            names = sa.inspect(conn).get_table_names()
        assert "only_here" not in names
    finally:
        for engine in engines:
            engine.dispose()


def test_postgres_runs_as_unprivileged_user(postgres_server: PostgresServer) -> None:
    # PostgreSQL refuses to start as root; when the suite runs as root the server must run as a
    # system user, and it does so as the owner of its data directory.
    owner = (postgres_server.directory / "data").stat().st_uid
    assert owner != 0 or os.geteuid() != 0
    conninfo = f"host=127.0.0.1 port={postgres_server.port} user=postgres dbname=postgres"
    with psycopg.connect(conninfo) as conn:
        assert conn.execute("SELECT current_user").fetchone() == ("postgres",)


def test_postgres_stop_removes_cluster() -> None:
    server = PostgresServer().start()
    directory, port = server.directory, server.port
    server.stop()
    assert not directory.exists()
    with pytest.raises(psycopg.OperationalError):
        psycopg.connect(f"host=127.0.0.1 port={port} user=postgres connect_timeout=2")


def test_stop_takes_the_whole_process_group(tmp_path: Path) -> None:
    # A server that forks (gunicorn, Celery's pool) must not leave its children behind.
    pid_file = tmp_path / "grandchild.pid"
    child = start_child(
        "forker",
        ["bash", "-c", f"sleep 300 & echo $! > {pid_file}; wait"],
        tmp_path / "forker.log",
        grace_seconds=2.0,
    )
    deadline = time.monotonic() + 10
    while not pid_file.exists() or not pid_file.read_text().strip():
        assert time.monotonic() < deadline
        time.sleep(0.05)
    grandchild = int(pid_file.read_text())
    child.stop()
    assert not child.alive()
    assert pid_gone(grandchild)


def test_children_die_when_the_launcher_is_killed(tmp_path: Path) -> None:
    # If pytest itself is SIGKILLed, no finaliser or atexit hook runs; the kernel's parent-death
    # signal must still take the servers down.
    pid_file = tmp_path / "server.pid"
    launcher = textwrap.dedent(
        f"""
        import time
        from pathlib import Path
        from service.local_stack import start_child
        c = start_child("sleeper", ["sleep", "300"], Path({str(tmp_path / "s.log")!r}))
        Path({str(pid_file)!r}).write_text(str(c.pid))
        time.sleep(300)
        """
    )
    proc = subprocess.Popen([sys.executable, "-c", launcher])
    try:
        deadline = time.monotonic() + 20
        while not pid_file.exists() or not pid_file.read_text().strip():
            assert time.monotonic() < deadline, "launcher never started its child"
            time.sleep(0.05)
        server_pid = int(pid_file.read_text())
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=10)
        assert pid_gone(server_pid)
    finally:
        proc.kill()


def test_free_port_is_bindable() -> None:
    import socket

    port = free_port()
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", port))
