"""The change-point job with its change year summed out, over HTTP, with a kill and a resume.

External reference: the engine's own in-process run (worker.runner.run_in_process in a fresh
process) must give the service's draws bit for bit, the per-draw change years included (they
come from the per-draw stream, so a resumed chain must draw the same ones); the model and data
are those of tests/samplers/test_integer_references.py (Jarrett 1979 coal-mining disasters, as
analysed by Carlin, Gelfand & Smith 1992), whose exact posterior that test checks for the
compound sampler. Here: no Gibbs step runs (no discrete_changes statistic), the change column
is whole, typed int64 and summarised like a sampled integer unknown.
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
def test_summed_out_change_point_over_http_with_a_resume_matches_in_process(
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
    # shorter than the Gibbs job's test: each gradient here sums over all 111 years
    body = coal_body(chains=2, draws=500, seed=1962)
    body["sampler"]["warmup_iterations"] = 500
    body["model"]["unknowns"]["change"]["summed_out"] = True
    job_url = submit(service.base_url, body)
    job_id = job_url.rsplit("/", 1)[1]
    kill_first_chain_after(service, sqlite_store, job_id, 600)
    job = finished(job_url, service, timeout=600)
    assert job["chains"][0]["attempts"] == 2, service.logs()

    expected = in_process(body)
    assert expected["names"] == ["early", "late", "change"]
    _, draws = call("GET", job_url + "/draws")
    assert np.array_equal(bits(json_draws(draws)), bits(expected["draws"]))
    change = json_draws(draws)[:, :, 2]
    assert np.all((change == np.round(change)) & (change >= 2) & (change <= 112))
    assert len(np.unique(change)) > 1

    _, columns = call("GET", job_url + "/columns")
    types = {c["name"]: c["type"] for c in columns["draws"]}
    assert types["change"] == "int64" and types["early"] == "float64"
    assert all(c["name"] != "discrete_changes" for c in columns["sampler_stats"])

    _, summary = call("GET", job_url + "/summary")
    assert summary["verdict"] == expected["verdict"]
    record = next(q for q in summary["quantities"] if q["name"] == "change")
    assert record["rhat"] is not None and record["bulk_ess"] > 0
    assert record["discrete"] is not None and record["discrete"]["values"]
