"""Discrete tables from the `drawyard` command and the client, as a real subprocess against
gunicorn, a real Celery worker, Redis and a real store (SQLite and PostgreSQL): `submit --pattern`
asks for a joint-pattern table, `drawyard probabilities` prints every table, and the client's
summary carries the same document.

The model is the beta-binomial of tests/service/test_discrete_summary_resource.py (invented
counts); the checks are that the documents agree, not statistical ones.
"""

from __future__ import annotations

import json
from pathlib import Path

from service.client import DrawyardClient
from service.discrete_tables import discrete_text
from service.job_commands import EXIT_PASSED
from tests.client.test_client_cli import drawyard
from tests.service.test_discrete_summary_resource import BODY

# A short run: loosened thresholds, so the exit code says whether the job ran (as in
# tests/client/test_assessment_live.py).
CHECKS = ["--check", "min_bulk_ess=50", "--check", "min_tail_ess=50", "--check", "max_rhat=1.1"]


def test_submit_with_a_pattern_then_print_the_tables(
    database_url: str, redis_url: str, live_service, tmp_path: Path
) -> None:
    service = live_service(database_url, redis_url, workers=1)
    spec, data = tmp_path / "spec.json", tmp_path / "data.json"
    spec.write_text(json.dumps(BODY["model"]))
    data.write_text(json.dumps(BODY["data"]))
    ran = drawyard("submit", str(spec), str(data), "--pattern", "picked", "--chains", "2",
                   "--warmup", "150", "--draws", "200", "--seed", "8", "--wait", "--interval",
                   "0.2", *CHECKS, url=service.base_url)
    assert ran.returncode == EXIT_PASSED, ran.stderr + service.logs()
    job_id = ran.stdout.splitlines()[0]
    printed = drawyard("probabilities", job_id, url=service.base_url)
    assert printed.returncode == EXIT_PASSED, printed.stderr
    with DrawyardClient(service.base_url) as client:
        document = client.summary(job_id)
    assert [t["name"] for t in document["patterns"]] == ["picked"]
    assert printed.stdout == discrete_text(dict(document))
    assert "joint patterns of picked" in printed.stdout and "picked[3]: P(= 1) = " in printed.stdout
