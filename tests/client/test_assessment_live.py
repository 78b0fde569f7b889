"""Laplace jobs, PSIS-LOO, comparisons, evidence and Bayes factors from the `drawyard` command, as
a real subprocess against gunicorn, real Celery workers, Redis and a real store (SQLite and
PostgreSQL); the exit codes are what a pipeline branches on.

Reference: the normal mean with known variance (BDA3, Gelman et al. 2013, section 2.5), whose
marginal likelihood is the density of y ~ N(m0 1, sigma^2 I + s0^2 1 1^T) (scipy.stats).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from scipy import stats

from service.job_commands import EXIT_BAD_INPUT, EXIT_PASSED
from tests.client.test_client_cli import drawyard
from tests.service.bodies import NOISE_SCALE, PRIOR_LOCATION, PRIOR_SCALE, Y, normal_mean

# Short runs: loosened thresholds, so the exit code says whether the job ran (as in
# tests/client/test_registry_live.py).
CHECKS = ["--check", "min_bulk_ess=100", "--check", "min_tail_ess=100", "--check", "max_rhat=1.05"]


def test_a_pipeline_branches_on_the_laplace_check_and_the_comparison(
    database_url: str, redis_url: str, live_service, tmp_path: Path
):
    service = live_service(database_url, redis_url, workers=2)

    def cli(*args: str):
        return drawyard(*args, url=service.base_url)

    spec = normal_mean()["model"]
    spec["per_draw"] = {"pointwise": ["obs"]}
    wide, shifted = tmp_path / "wide.json", tmp_path / "shifted.json"
    wide.write_text(json.dumps(spec))
    spec["priors"][0]["arguments"] = {"location": 5, "scale": 0.1}
    shifted.write_text(json.dumps(spec))
    data = tmp_path / "data.json"
    data.write_text(json.dumps({"n": len(Y), "y": Y}))

    def submit(spec_file: Path, *options: str) -> str:
        ran = cli("submit", str(spec_file), str(data), "--wait", "--interval", "0.2", *options)
        assert ran.returncode == EXIT_PASSED, ran.stderr + service.logs()
        return ran.stdout.splitlines()[0]

    submit(wide, "--method", "laplace", "--seed", "3")
    good = submit(wide, "--chains", "2", "--draws", "500", "--seed", "4", *CHECKS)
    bad = submit(shifted, "--chains", "2", "--draws", "500", "--seed", "5", *CHECKS)

    loo = cli("loo", good)
    assert loo.returncode == EXIT_PASSED, loo.stderr
    assert loo.stdout.startswith("elpd_loo")
    compared = cli("compare", bad, good, "--json")
    assert compared.returncode == EXIT_PASSED, compared.stderr
    assert [r["job"] for r in json.loads(compared.stdout)["ranked"]] == [good, bad]

    evidence = cli("evidence", good, "--json")
    assert evidence.returncode == EXIT_PASSED, evidence.stderr
    document = json.loads(evidence.stdout)
    y = np.array(Y)
    exact = stats.multivariate_normal(
        np.full(y.size, PRIOR_LOCATION), NOISE_SCALE ** 2 * np.eye(y.size) + PRIOR_SCALE ** 2
    ).logpdf(y)
    assert abs(document["log_evidence"] - exact) < 3 * document["relative_error"]
    factor = cli("bayes-factor", good, bad, "--json")
    assert factor.returncode == EXIT_PASSED, factor.stderr
    assert json.loads(factor.stdout)["log_bayes_factor"] > 0

    three = normal_mean()["model"]
    three["unknowns"].update({"b": {}, "c": {}})
    three["priors"] += [{"on": k, "distribution": "normal",
                         "arguments": {"location": 0, "scale": 1}} for k in ("b", "c")]
    grid_spec = tmp_path / "three.json"
    grid_spec.write_text(json.dumps(three))
    refused = cli("submit", str(grid_spec), str(data), "--method", "grid")
    assert refused.returncode == EXIT_BAD_INPUT
    assert "/sampler/method" in refused.stderr
