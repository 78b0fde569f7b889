"""docs/monitoring.md, "Logs": every process writes one JSON object a line, from start to stop,
except the two plain lines the queue library prints on a worker's stdout when it stops (an empty
one and "worker: Warm shutdown (MainProcess)"), which the page names. Earlier the page said
"one JSON object per line" without the exception; a stopped service showed otherwise. With
DRAWYARD_LOG_FORMAT=text the lines are plain, as the page says.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import requests

from service.store import migrate
from tests.conftest import sqlite_url
from tests.service.bodies import normal_mean

# The lines docs/monitoring.md names, exactly.
CELERY_STOP_LINES = ["", "worker: Warm shutdown (MainProcess)"]
FIELDS = {"time", "level", "logger", "message", "request_id", "job_id", "chain", "process"}


def _run_one_job_and_stop(live_service, redis_url: str, tmp_path: Path, env: dict) -> list:
    url = sqlite_url(tmp_path / "store.sqlite")
    migrate(url)
    service = live_service(url, redis_url, workers=1, env=env)
    job = requests.post(f"{service.base_url}/v1/jobs", json=normal_mean(), timeout=30).json()
    deadline = time.monotonic() + 180
    while requests.get(f"{service.base_url}/v1/jobs/{job['id']}", timeout=30).json()["state"] in (
        "queued", "running"
    ):
        assert time.monotonic() < deadline, service.logs()
        time.sleep(0.5)
    children = [*service.workers, service.closing_worker, service.sweeper, service.api]
    for child in children:
        child.stop()
    return children


def test_every_line_of_every_process_is_json_but_the_named_stop_lines(
    live_service, redis_url: str, tmp_path: Path
) -> None:
    children = _run_one_job_and_stop(live_service, redis_url, tmp_path, {})
    for child in children:
        lines = child.log_path.read_text().splitlines()
        assert lines, child.name
        plain = []
        for line in lines:
            try:
                record = json.loads(line)
            except json.JSONDecodeError:
                plain.append(line)
                continue
            assert FIELDS <= record.keys(), (child.name, line)
        is_worker = child in children[:2]
        assert plain == (CELERY_STOP_LINES if is_worker else []), (child.name, plain)


def test_the_text_format_writes_plain_lines(live_service, redis_url: str, tmp_path: Path) -> None:
    children = _run_one_job_and_stop(
        live_service, redis_url, tmp_path, {"DRAWYARD_LOG_FORMAT": "text"}
    )
    for child in children:
        lines = [line for line in child.log_path.read_text().splitlines() if line]
        assert lines, child.name
        for line in lines:
            assert not line.startswith("{"), (child.name, line)
