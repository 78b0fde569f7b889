"""A job past its wall-time limit: stopped, ended ``timed_out``, its draws so far kept and marked.

Real gunicorn, Celery worker processes, Redis and a SQLite store, with DRAWYARD_CHAIN_TIME_LIMIT
set low. The models are sized so that a full run takes many times the limit (a normal mean over
20,000 observations runs at a few thousand iterations a second here), so the limit is always hit:
in sampling for a short warm-up, in warm-up for a long one. The reference is the engine's own
uninterrupted run of the same body and seed (worker.runner.run_in_process, in a fresh process):
the engine is deterministic per seed, so a chain stopped early must hold exactly, bit for bit,
the first rows of that run. The mean in the summary is checked against numpy's mean of the pooled
common prefix of the reference draws (arithmetic, to rounding).
"""

from __future__ import annotations

import io
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest
import requests

from service.job_commands import EXIT_PASSED, EXIT_TIMED_OUT
from service.partial_results import MIN_SUMMARISED_DRAWS, WALL_TIME_CHECK
from tests.faults.job_watch import (
    REPO_ROOT,
    StoreView,
    bits,
    in_process_draws,
    job_ended,
    submit,
)
from tests.service.bodies import normal_mean
from tests.service.response_contract import check_requests

LIMIT_SECONDS = 2
OBSERVATIONS = 20_000
DRAWYARD = str(Path(sys.executable).with_name("drawyard"))
SERVICE_ENV = {
    "DRAWYARD_CHAIN_TIME_LIMIT": str(LIMIT_SECONDS),
    # The limit is checked where progress is written; a short interval stops the chain promptly.
    "DRAWYARD_PROGRESS_INTERVAL": "0.25",
}


def slow_body(warmup: int, draws: int, chains: int, seed: int) -> dict:
    """A normal mean whose every iteration reads 20,000 observations: far slower than the limit."""
    body = normal_mean(chains=chains, warmup=warmup, draws=draws, seed=seed)
    y = np.random.default_rng(seed).normal(1.0, 1.0, OBSERVATIONS).round(4)
    body["data"] = {"n": OBSERVATIONS, "y": y.tolist()}
    return body


def checked_get(url: str, status: int = 200) -> dict:
    """GET a JSON resource, checked against the schema the API publishes for it."""
    response = requests.get(url, timeout=120)
    document = check_requests(response)
    assert response.status_code == status, f"{url}: {response.status_code} {document}"
    return document


def json_values(chain: dict) -> np.ndarray:
    special = {"NaN": np.nan, "Infinity": np.inf, "-Infinity": -np.inf}
    rows = [[special.get(v, v) if isinstance(v, str) else v for v in row] for row in chain["draws"]]
    return np.asarray(rows, dtype=np.float64).reshape(len(rows), -1)


def drawyard(*args: str, url: str) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if not k.startswith("DRAWYARD_")}
    env["DRAWYARD_URL"] = url
    return subprocess.run(
        [DRAWYARD, *args], capture_output=True, text=True, timeout=120, env=env, cwd=REPO_ROOT
    )


def test_a_job_stopped_in_sampling_keeps_the_first_draws_of_the_full_run(
    sqlite_store: str, redis_url: str, live_service, tmp_path: Path
) -> None:
    service = live_service(sqlite_store, redis_url, workers=2, env=SERVICE_ENV)
    body = slow_body(warmup=100, draws=90_000, chains=2, seed=5101)
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]

    job = job_ended(job_url, 120, service.logs)
    job = checked_get(job_url)
    assert job["state"] == "timed_out", service.logs()
    assert job["partial"] is True
    assert "wall-time limit of 2 s" in job["error"]
    for chain in job["chains"]:
        # Each chain hit the limit on its own, in sampling, part way through.
        assert chain["state"] == "timed_out" and chain["phase"] == "sampling", chain
        assert 100 < chain["iteration"] < chain["iterations_total"], chain
        assert f"wall-time limit of {LIMIT_SECONDS} s" in chain["error"]

    draws = checked_get(job_url + "/draws")
    assert draws["partial"] is True
    stored = [json_values(chain) for chain in draws["chains"]]
    lengths = [values.shape[0] for values in stored]
    for chain, count in zip(job["chains"], lengths, strict=True):
        assert count == chain["iteration"] - 100  # sampling-phase iterations only
        assert count >= MIN_SUMMARISED_DRAWS

    reference = in_process_draws(body)
    assert reference.shape[1] == 90_000  # the reference ran to the end
    for index, values in enumerate(stored):
        assert np.array_equal(bits(values), bits(reference[index, : values.shape[0]])), index

    stats = checked_get(job_url + "/sampler-stats")
    assert stats["partial"] is True
    assert [len(chain["draws"]) for chain in stats["chains"]] == lengths

    summary = checked_get(job_url + "/summary")
    common = min(lengths)
    assert summary["partial"] is True and summary["summarised_draws_per_chain"] == common
    (mu,) = [q for q in summary["quantities"] if q["name"] == "mu"]
    pooled = reference[:, :common, 0]
    assert mu["mean"] == pytest.approx(float(np.mean(pooled)), rel=1e-12, abs=1e-12)
    verdict = summary["verdict"]
    assert verdict["passed"] is False
    (named,) = [f for f in verdict["failed_checks"] if f["check"] == WALL_TIME_CHECK]
    assert "wall-time limit" in named["message"] and "partial" in named["message"]
    assert checked_get(job_url + "/diagnostics")["partial"] is True

    audit = checked_get(job_url + "/audit")
    assert audit["partial"] is True
    for record, chain in zip(audit["chains"], job["chains"], strict=True):
        assert record["time_limit_seconds"] == LIMIT_SECONDS
        assert record["iteration"] == chain["iteration"]
        assert record["draws_shape"] == [chain["iteration"] - 100, 1]

    # The download formats that carry metadata say it too (Parquet key-value metadata).
    parquet = requests.get(job_url + "/draws?format=parquet", timeout=120)
    assert parquet.status_code == 200
    assert pq.read_schema(io.BytesIO(parquet.content)).metadata[b"drawyard.partial"] == b"true"
    page = requests.get(f"{service.base_url}/jobs/{job_id}", timeout=60)
    assert page.status_code == 200 and "Stopped at the wall-time limit" in page.text
    metrics = requests.get(service.base_url + "/metrics", timeout=60).text
    assert 'drawyard_jobs{state="timed_out"} 1.0' in metrics.splitlines()

    store = StoreView(sqlite_store)
    try:
        assert store.draws_rows(job_id) == 2
    finally:
        store.close()

    watched = drawyard("watch", job_id, "--no-progress", url=service.base_url)
    assert watched.returncode == EXIT_TIMED_OUT, watched.stderr
    target = tmp_path / "draws.csv"
    fetched = drawyard("fetch", job_id, "draws", "--format", "csv", "-o", str(target),
                       url=service.base_url)  # fmt: skip
    assert fetched.returncode == EXIT_PASSED, fetched.stderr
    assert "partial" in fetched.stderr
    rows = target.read_text().splitlines()
    assert len(rows) == 1 + sum(lengths)


def test_a_job_stopped_in_warm_up_ends_timed_out_with_no_draws_and_says_why(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    service = live_service(sqlite_store, redis_url, workers=1, env=SERVICE_ENV)
    job_url = submit(service.base_url, slow_body(warmup=90_000, draws=100, chains=1, seed=5102))
    job_id = job_url.rsplit("/", 1)[1]

    job_ended(job_url, 120, service.logs)
    job = checked_get(job_url)
    assert job["state"] == "timed_out", service.logs()
    assert job["partial"] is True
    (chain,) = job["chains"]
    assert chain["state"] == "timed_out" and chain["phase"] == "warmup", chain
    assert 0 < chain["iteration"] < 90_000
    assert "during warm-up" in job["error"] and "DRAWYARD_CHAIN_TIME_LIMIT" in job["error"]
    assert "fewer warm-up iterations" in job["error"]
    assert job["verdict"]["passed"] is False
    assert [f["check"] for f in job["verdict"]["failed_checks"]] == [WALL_TIME_CHECK]

    for resource in ("summary", "diagnostics", "draws", "sampler-stats"):
        problem = checked_get(f"{job_url}/{resource}", status=409)
        assert "during warm-up" in problem["detail"], resource
    audit = checked_get(job_url + "/audit")
    assert audit["chains"][0]["time_limit_seconds"] == LIMIT_SECONDS
    assert audit["chains"][0]["iteration"] == chain["iteration"]
    assert audit["chains"][0]["draws_shape"] == [0, 1]

    watched = drawyard("watch", job_id, "--no-progress", url=service.base_url)
    assert watched.returncode == EXIT_TIMED_OUT, watched.stderr
    assert "during warm-up" in watched.stderr
