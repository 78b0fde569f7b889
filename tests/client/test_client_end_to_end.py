"""The Python client against the real service: gunicorn, two Celery workers, Redis, SQLite.

External references: the closed-form posterior of a normal mean with known variance (Gelman et
al. 2013, Bayesian Data Analysis 3rd ed., section 2.5) for the numbers that come back, compared
within 5 Monte Carlo standard errors (common practice); 17 significant digits round-trip an IEEE
754 double (IEEE 754-2008 section 5.12.2; common practice), so the JSON and CSV downloads must
hold identical values; RFC 4180 (Shafranovich 2005) for reading the CSV with Python's csv module.
"""

from __future__ import annotations

import csv
import io
import os
import threading
import uuid
from pathlib import Path

import numpy as np
import pytest

from service.client import DrawyardClient, ProblemError, wait_for_job
from tests.harness.live_service import LiveService
from tests.service.bodies import normal_mean, posterior_mean_sd, variant

TIMEOUT = 240.0


@pytest.fixture(scope="module")
def finished(shared_service: LiveService) -> tuple[DrawyardClient, str, dict]:
    """One small job run to the end through the client, with its progress drawn on a pty."""
    api = DrawyardClient(shared_service.base_url, read_timeout=30)
    body = variant(normal_mean(chains=2, warmup=200, draws=300), labels={"suite": "client-e2e"})
    job = api.submit(body)
    assert job.state in ("queued", "running", "succeeded")
    # A real pseudo-terminal, so the "is stdout a terminal" test in wait_for_job sees a terminal;
    # a thread empties it as it fills, so a long wait never blocks on a full buffer.
    leader, follower = os.openpty()
    chunks: list[bytes] = []
    reader = threading.Thread(target=_drain, args=(leader, chunks), daemon=True)
    reader.start()
    with open(follower, "w", closefd=True) as terminal:
        done = wait_for_job(api, job.id, interval=0.2, timeout=TIMEOUT, stream=terminal)
    reader.join(10)
    os.close(leader)
    drawn = b"".join(chunks).decode(errors="replace")
    return api, done.id, {"job": done, "drawn": drawn, "body": body}


def _drain(fd: int, chunks: list[bytes]) -> None:
    # Linux answers EIO on the leader side once the follower side is closed: the end of output.
    while True:
        try:
            chunk = os.read(fd, 65536)
        except OSError:
            return
        if not chunk:
            return
        chunks.append(chunk)


def test_the_job_succeeds_and_a_bar_is_drawn_on_a_terminal(finished) -> None:
    _, _, seen = finished
    job = seen["job"]
    assert job.state == "succeeded", job.raw
    assert job.verdict is not None and job.chains
    assert all(c.state == "succeeded" for c in job.chains)
    assert "\r[" in seen["drawn"]
    assert "100% succeeded" in seen["drawn"]


def test_the_summary_matches_the_closed_form_posterior(finished) -> None:
    """BDA3 section 2.5: mu | y is normal with the mean and sd of posterior_mean_sd()."""
    api, job_id, _ = finished
    summary = api.summary(job_id)
    record = next(q for q in summary["quantities"] if q["name"] == "mu")
    mean, sd = posterior_mean_sd()
    assert abs(record["mean"] - mean) < 5 * record["mean_error"]
    assert abs(record["sd"] - sd) < 5 * record["sd_error"]
    assert summary["verdict"] == finished[2]["job"].raw["verdict"]


def test_json_and_csv_draws_hold_the_same_numbers(finished, tmp_path: Path) -> None:
    api, job_id, _ = finished
    document = api.draws(job_id, quantities=["mu"], chains=[2, 1], thin=3)
    assert document["quantities"] == ["mu"] and document["thin"] == 3
    assert [c["chain"] for c in document["chains"]] == [2, 1]
    from_json = np.array([row for c in document["chains"] for row in c["draws"]], dtype=float)
    assert from_json.shape == (2 * 100, 1)
    target = tmp_path / "draws.csv"
    written = api.download(job_id, "draws", target, "csv", ["mu"], [2, 1], 3)
    assert written == target.stat().st_size
    rows = list(csv.reader(io.StringIO(target.read_text())))
    assert rows[0] == ["chain", "draw", "mu"]
    cells = np.array(rows[1:], dtype=float)
    np.testing.assert_array_equal(cells[:, 2:], from_json)
    np.testing.assert_array_equal(cells[:100, 0], 2)
    np.testing.assert_array_equal(cells[:3, 1], [1, 4, 7])


def test_a_repeated_key_returns_the_same_job_and_labels_find_it(finished) -> None:
    api, _, seen = finished
    key = f"client-e2e-{uuid.uuid4().hex}"
    body = variant(seen["body"], labels={"suite": "client-e2e", "run": key})
    first = api.submit(body, idempotency_key=key)
    again = api.submit(body, idempotency_key=key)
    assert again.id == first.id
    found = [j.id for j in api.iter_jobs(labels={"run": key})]
    assert found == [first.id]
    paged = [j.id for j in api.iter_jobs(labels=["suite:client-e2e"], page_size=1)]
    assert set(paged) == {first.id, finished[1]} and len(paged) == 2
    wait_for_job(api, first.id, interval=0.2, timeout=TIMEOUT, progress=False)


def test_no_bar_when_the_stream_is_not_a_terminal(finished) -> None:
    api, job_id, _ = finished
    quiet = io.StringIO()
    job = wait_for_job(api, job_id, interval=0.2, timeout=10, stream=quiet)
    assert job.state == "succeeded" and quiet.getvalue() == ""


def test_refusals_come_back_as_problem_documents(finished) -> None:
    api, _, seen = finished
    bad = variant(seen["body"], checks={"max_rhatt": 1.01})
    with pytest.raises(ProblemError) as caught:
        api.submit(bad)
    assert caught.value.status == 422
    assert caught.value.errors[0]["pointer"] == "/checks/max_rhatt"
    with pytest.raises(ProblemError) as missing:
        api.job("f" * 32)
    assert missing.value.status == 404 and missing.value.is_client_error
