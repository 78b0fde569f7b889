"""`drawyard serve` starts a working local service and Ctrl-C takes every part of it down.

What "ready" means is the service's own contract (DEVELOPERS.md, "Service contracts": GET
/v1/health/ready answers 200 when the database and broker are reachable). That SIGINT is what a
terminal sends on Ctrl-C is POSIX terminal behaviour (common practice).
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import requests

from service.local_stack import free_port, redis_installed
from tests.harness.processes import descendants_of, pid_gone


def start_serve(tmp_path: Path, broker: str) -> tuple[subprocess.Popen, str, Path]:
    port = free_port()
    log = tmp_path / "serve.out"
    env = {k: v for k, v in os.environ.items() if not k.startswith("DRAWYARD_")}
    with open(log, "wb") as out:
        proc = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--var", str(tmp_path / "var"),
             "--port", str(port), "--broker", broker],
            stdout=out, stderr=subprocess.STDOUT, env=env,
        )
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 90
    while "Press Ctrl-C" not in log.read_text():
        assert proc.poll() is None, log.read_text()
        assert time.monotonic() < deadline, log.read_text()
        time.sleep(0.1)
    return proc, base, log


@pytest.mark.parametrize("broker", ["redis", "filesystem"])
def test_serve_answers_and_ctrl_c_stops_everything(tmp_path: Path, broker: str) -> None:
    if broker == "redis" and not redis_installed():
        pytest.fail("redis-server is not installed; run tests/harness/install_services.sh")
    proc, base, log = start_serve(tmp_path, broker)
    try:
        assert requests.get(base + "/v1/health/live", timeout=5).status_code == 200
        assert requests.get(base + "/v1/health/ready", timeout=5).status_code == 200
        spawned = descendants_of(proc.pid)
        # gunicorn's arbiter and its worker, Celery's main process and its pool process (+ redis).
        assert len(spawned) >= (5 if broker == "redis" else 4), spawned
        # The warning banner wraps its text over framed lines; read it back as one paragraph.
        text = " ".join(line.removeprefix("!! ") for line in log.read_text().splitlines())
        if broker == "filesystem":
            assert "SINGLE MACHINE ONLY" in text
        else:
            assert "redis-server on port" in text
        assert (tmp_path / "var" / "drawyard.sqlite").exists()
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=60) == 0, log.read_text()
        for pid in spawned:
            assert pid_gone(pid), f"process {pid} outlived `drawyard serve`"
        with pytest.raises(requests.ConnectionError):
            requests.get(base + "/v1/health/live", timeout=5)
    finally:
        if proc.poll() is None:
            proc.kill()


def test_every_command_has_help() -> None:
    for command in ([], ["serve"], ["migrate"], ["worker"]):
        result = subprocess.run(
            [sys.executable, "-m", "service.cli", *command, "--help"],
            capture_output=True, text=True, timeout=60,
        )
        assert result.returncode == 0, result.stderr
        assert result.stdout.startswith("usage: drawyard")


def test_migrate_creates_the_store(tmp_path: Path) -> None:
    import sqlalchemy as sa

    url = f"sqlite:///{tmp_path / 'm.sqlite'}"
    result = subprocess.run(
        [sys.executable, "-m", "service.cli", "migrate", "--database-url", url],
        capture_output=True, text=True, timeout=120,
    )
    assert result.returncode == 0, result.stderr
    engine = sa.create_engine(url)
    try:
        tables = set(sa.inspect(engine).get_table_names())
    finally:
        engine.dispose()
    assert {"jobs", "alembic_version"} <= tables


def test_worker_command_consumes_and_stops_on_sigterm(tmp_path: Path, redis_url: str) -> None:
    # Celery's documented shutdown: SIGTERM is a warm shutdown that ends the worker cleanly.
    log = tmp_path / "worker.out"
    env = {k: v for k, v in os.environ.items() if not k.startswith("DRAWYARD_")}
    env.update({"DRAWYARD_BROKER_URL": redis_url,
                "DRAWYARD_DATABASE_URL": f"sqlite:///{tmp_path / 'w.sqlite'}"})
    with open(log, "wb") as out:
        proc = subprocess.Popen(
            # drawyard's own options, and one of the library's passed through after --
            [sys.executable, "-m", "service.cli", "worker", "--name", "cli-test@box",
             "--processes", "1", "--logging", "INFO", "--", "--without-gossip"],
            stdout=out, stderr=subprocess.STDOUT, env=env,
        )
    try:
        deadline = time.monotonic() + 60
        while " ready." not in log.read_text():
            assert proc.poll() is None, log.read_text()
            assert time.monotonic() < deadline, log.read_text()
            time.sleep(0.1)
        assert "cli-test@box" in log.read_text()
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=60) == 0, log.read_text()
    finally:
        if proc.poll() is None:
            proc.kill()
