"""A change-point job (an integer unknown updated by Gibbs steps, two rates by NUTS) over HTTP.

External reference: the engine's own in-process run (worker.runner.run_in_process in a fresh
process) must give the service's draws bit for bit, through checkpoints and a resume on another
worker after the first is killed; the model and data are those of
tests/samplers/test_integer_references.py (Jarrett 1979 coal-mining disasters, as analysed by
Carlin, Gelfand & Smith 1992), whose exact posterior that test checks. Here: the service path
(submit, workers, checkpoints, resume, draws, columns, sampler statistics, summary,
diagnostics) keeps the integer column whole and the chain reproducible.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.harness.in_process import in_process
from tests.samplers.test_integer_references import coal_body
from tests.service.test_live_service import (
    bits,
    call,
    finished,
    json_draws,
    kill_first_chain_after,
    submit,
)


@pytest.mark.slow
def test_change_point_over_http_with_a_resume_matches_in_process(
    sqlite_store: str, redis_url: str, live_service
) -> None:
    service = live_service(
        sqlite_store,
        redis_url,
        workers=2,
        env={
            "DRAWYARD_LEASE_SECONDS": "3",
            "DRAWYARD_PROGRESS_INTERVAL": "0.25",
            "DRAWYARD_CHECKPOINT_EVERY": "37",
        },
    )
    body = coal_body(chains=2, draws=1500, seed=1851)
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]
    kill_first_chain_after(service, sqlite_store, job_id, 1200)
    job = finished(job_url, service, timeout=600)
    assert job["chains"][0]["attempts"] == 2, service.logs()

    expected = in_process(body)
    _, draws = call("GET", job_url + "/draws")
    assert np.array_equal(bits(json_draws(draws)), bits(expected["draws"]))
    change = json_draws(draws)[:, :, expected["names"].index("change")]
    assert np.all((change == np.round(change)) & (change >= 2) & (change <= 112))

    _, columns = call("GET", job_url + "/columns")
    types = {c["name"]: c["type"] for c in columns["draws"]}
    assert types["change"] == "int64" and types["early"] == "float64"
    assert {"name": "discrete_changes", "plain": "discrete_changes", "type": "int64"} in \
        columns["sampler_stats"]

    _, stats = call("GET", job_url + "/sampler-stats")
    column = stats["statistics"].index("discrete_changes")
    changes = [row[column] for chain in stats["chains"] for row in chain["draws"]]
    assert all(isinstance(c, int) and c in (0, 1) for c in changes) and 0 < sum(changes)

    _, summary = call("GET", job_url + "/summary")
    assert summary["verdict"] == expected["verdict"]
    record = next(q for q in summary["quantities"] if q["name"] == "change")
    assert record["rhat"] is not None and record["bulk_ess"] > 0
    response, _ = call("GET", job_url + "/diagnostics")
    assert response.status_code == 200
    # bridge sampling covers continuous unknowns only: refused, with a pointer, not a 500
    response, problem = call("GET", job_url + "/evidence")
    assert response.status_code == 422
    assert problem["errors"][0]["pointer"] == "/model/unknowns"
