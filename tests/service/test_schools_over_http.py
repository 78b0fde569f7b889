"""The eight schools over HTTP give the in-process draws bit for bit, through checkpoints by
iteration count and by time and a resume after a worker is killed.

The outside report of under-dispersed NUTS draws came over HTTP; the in-process runs did not show
it. If the service's path (checkpoints every N iterations and every few seconds, a resume on
another worker) changed any draw, this is where it would differ. External reference: the engine's
own in-process run (worker.runner.run_in_process, in a fresh process); the model is the
outside report's (tests/samplers/eight_schools.py: Rubin 1981 data, BDA3 section 5.4).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.harness.in_process import in_process
from tests.samplers.eight_schools import DATA, SPEC
from tests.service.test_live_service import (
    bits,
    call,
    finished,
    json_draws,
    kill_first_chain_after,
    submit,
)


@pytest.mark.slow
def test_eight_schools_over_http_with_checkpoints_and_a_resume_match_in_process(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    """Checkpoints every 37 iterations and every 0.05 s (so some fall at arbitrary iterations,
    in warm-up windows and in sampling); chain 1's worker process is killed once it has a
    checkpoint past iteration 1500 and the chain resumes from it on the other worker."""
    service = live_service(
        sqlite_store,
        redis_url,
        workers=2,
        env={
            "DRAWYARD_LEASE_SECONDS": "3",
            "DRAWYARD_PROGRESS_INTERVAL": "0.25",
            "DRAWYARD_CHECKPOINT_EVERY": "37",
            "DRAWYARD_CHECKPOINT_SECONDS": "0.05",
        },
    )
    body = {"model": SPEC, "data": DATA, "sampler": {"chains": 4, "draws": 4000, "seed": 1981}}
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]
    kill_first_chain_after(service, sqlite_store, job_id, 1500)
    job = finished(job_url, service, timeout=600)
    assert job["chains"][0]["attempts"] == 2, service.logs()
    expected = in_process(body)
    _, draws = call("GET", job_url + "/draws")
    assert np.array_equal(bits(json_draws(draws)), bits(expected["draws"]))
    _, summary = call("GET", job_url + "/summary")
    assert summary["verdict"] == expected["verdict"]
