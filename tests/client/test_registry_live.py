"""The model registry, result reuse and warm starts end to end: the `drawyard` command as a real
subprocess and the Python client, against gunicorn, real Celery workers, Redis and a real store
(SQLite and PostgreSQL), with API keys configured.

External references: the closed-form posterior of a normal mean with known variance (Gelman et
al. 2013, Bayesian Data Analysis 3rd ed., section 2.5), within 5 Monte Carlo standard errors
(common practice); FIPS 180-4 SHA-256 (Python's hashlib) of the canonical JSON for the model
hash; RFC 6750 section 3 for the 401 a wrong key gets.
"""

from __future__ import annotations

import hashlib
import json
import time
from pathlib import Path

import requests

from service.canonical import jcs_json
from service.client import DrawyardClient, wait_for_job
from service.job_commands import EXIT_BAD_INPUT, EXIT_PASSED
from service.warm_start import DEFAULT_WARM_WARMUP
from tests.client.test_client_cli import drawyard
from tests.security.access_helpers import create_key
from tests.service.bodies import Y, normal_mean, posterior_mean_sd

# Short runs (2 chains of 300 draws): thresholds loosened so that the exit code says whether the
# job ran, not whether 600 draws happened to reach the defaults.
CHECKS = ["--check", "min_bulk_ess=100", "--check", "min_tail_ess=100", "--check", "max_rhat=1.05"]


def canonical_sha256(value) -> str:
    """RFC 8785 canonical JSON (service.canonical.jcs_json, checked on the RFC's own examples in
    tests/canonical/test_rfc8785.py), then SHA-256."""
    return hashlib.sha256(jcs_json(value)).hexdigest()


def write_files(folder: Path) -> dict[str, Path]:
    spec = normal_mean()["model"]
    paths = {name: folder / name for name in ("spec.json", "spec2.json", "y.csv", "n.json",
                                               "settings.json")}  # fmt: skip
    paths["spec.json"].write_text(json.dumps(spec))
    spec["priors"][0]["arguments"]["scale"] = 5.0
    paths["spec2.json"].write_text(json.dumps(spec))
    paths["y.csv"].write_text("y\n" + "\n".join(repr(v) for v in Y) + "\n")
    paths["n.json"].write_text(json.dumps({"n": len(Y)}))
    paths["settings.json"].write_text(
        json.dumps({"sampler": {"chains": 2, "warmup_iterations": 1000, "draws": 300}})
    )
    paths["refit.json"] = folder / "refit.json"
    paths["refit.json"].write_text(json.dumps({"sampler": {"chains": 2, "draws": 300}}))
    return paths


def test_register_submit_by_name_reuse_and_warm_start_with_keys(
    database_url: str, redis_url: str, live_service, tmp_path: Path
):
    service = live_service(database_url, redis_url, workers=2)
    url = service.base_url
    key = create_key(database_url, "pipelines").secret
    files = write_files(tmp_path)

    def cli(*args: str, api_key: str | None = key):
        return drawyard(*args, url=url, api_key=api_key)

    first = cli("models", "register", "demand", str(files["spec.json"]))
    assert first.returncode == EXIT_PASSED, first.stderr
    assert first.stdout.strip() == "1" and "new version 1" in first.stderr
    again = cli("models", "register", "demand", str(files["spec.json"]))
    assert again.stdout.strip() == "1" and "unchanged" in again.stderr
    second = cli("models", "register", "demand", str(files["spec2.json"]))
    assert second.stdout.strip() == "2"
    names = cli("models", "list")
    assert names.returncode == EXIT_PASSED and names.stdout.startswith("demand  latest 2")
    versions = cli("models", "list", "demand", "--json", "--limit", "1")  # follows the pages
    listed = json.loads(versions.stdout)["versions"]
    assert [v["version"] for v in listed] == [2, 1]
    assert listed[1]["sha256"] == canonical_sha256(json.loads(files["spec.json"].read_text()))
    shown = cli("models", "show", "demand", "1")
    assert json.loads(shown.stdout) == json.loads(files["spec.json"].read_text())
    refused = cli("models", "list", api_key=key + "x")
    assert refused.returncode == EXIT_BAD_INPUT and "401" in refused.stderr

    submit = ["submit", "--model", "demand:1", str(files["y.csv"]), "--data", str(files["n.json"]),
              "--settings", str(files["settings.json"]), "--seed", "31", *CHECKS, "--wait",
              "--interval", "0.2"]  # fmt: skip
    ran = cli(*submit)
    assert ran.returncode == EXIT_PASSED, ran.stderr + service.logs()
    ran_id = ran.stdout.splitlines()[0]
    client = DrawyardClient(url, api_key=key)
    job = client.job(ran_id)
    assert job.raw["model_ref"]["name"] == "demand" and job.raw["model_ref"]["version"] == 1
    assert client.audit(ran_id)["model_ref"] == job.raw["model_ref"]
    record = next(q for q in client.summary(ran_id)["quantities"] if q["name"] == "mu")
    mean, _ = posterior_mean_sd()  # BDA3 section 2.5
    assert abs(record["mean"] - mean) < 5 * record["mean_error"]

    # The same again: the earlier result, at once, as a job of its own.
    reused = cli(*submit)
    assert reused.returncode == EXIT_PASSED, reused.stderr
    reused_id = reused.stdout.splitlines()[0]
    reused_job = client.job(reused_id)
    assert reused_id != ran_id and reused_job.raw["reused_from"] == ran_id
    assert all(c.attempts == 0 for c in reused_job.chains)
    assert client.draws(reused_id)["chains"] == client.draws(ran_id)["chains"]
    audit = client.audit(reused_id)
    assert audit["reused_from"] == ran_id
    assert any(e["kind"] == "result_reused" for e in audit["events"])

    forced = cli(*submit, "--no-reuse")
    assert forced.returncode == EXIT_PASSED, forced.stderr
    forced_job = client.job(forced.stdout.splitlines()[0])
    assert forced_job.raw["reused_from"] is None
    assert all(c.attempts == 1 for c in forced_job.chains)

    # Version 2 (another prior, the same unknowns) starts from the run of version 1.
    warm = cli("submit", "--model", "demand", str(files["y.csv"]), "--data", str(files["n.json"]),
               "--settings", str(files["refit.json"]), "--seed", "32", *CHECKS,
               "--warm-start", ran_id, "--wait", "--interval", "0.2")  # fmt: skip
    assert warm.returncode == EXIT_PASSED, warm.stderr + service.logs()
    warm_job = client.job(warm.stdout.splitlines()[0])
    assert warm_job.raw["warm_start_from"] == ran_id
    assert warm_job.raw["model_ref"]["version"] == 2
    warm_audit = client.audit(warm_job.id)
    assert warm_audit["warm_start_from"] == ran_id
    # The shorter warm-up: the service's default for warm starts, against 1000 for the cold run.
    assert warm_audit["settings"]["warmup_iterations"] == DEFAULT_WARM_WARMUP
    assert client.audit(ran_id)["settings"]["warmup_iterations"] == 1000
    assert all(c.iterations_total == DEFAULT_WARM_WARMUP + 300 for c in warm_job.chains)
    record = next(q for q in client.summary(warm_job.id)["quantities"] if q["name"] == "mu")
    # BDA3 section 2.5 with version 2's prior N(0, 5^2): precision 1/25 + n, mean sum(y)/precision.
    refit_mean = sum(Y) / (1 / 25 + len(Y))
    assert abs(record["mean"] - refit_mean) < 5 * record["mean_error"]

    # A warm start from a job this tenant cannot see is bad input, and nothing is made.
    other = create_key(database_url, "elsewhere").secret
    before = client.list_jobs(limit=50).jobs
    stranger = cli(*submit[:-3], "--warm-start", ran_id, api_key=other)
    assert stranger.returncode == EXIT_BAD_INPUT
    assert "/model_ref/name" in stranger.stderr  # its tenant has no model "demand" either
    inline = requests.post(
        f"{url}/v1/jobs",
        json={**normal_mean(), "warm_start": {"job": ran_id}},
        headers={"Authorization": f"Bearer {other}"},
        timeout=30,
    )
    assert inline.status_code == 422
    assert inline.json()["errors"][0]["pointer"] == "/warm_start/job"
    assert [j.id for j in client.list_jobs(limit=50).jobs] == [j.id for j in before]


def test_a_reused_job_sends_its_completion_callback_at_once(tmp_path: Path, redis_url: str,
                                                             live_service):
    """A reused result is final from the start, so its own callback (signed, HMAC-SHA256 as in
    RFC 2104, checked by the loopback receiver) names the new job as succeeded."""
    from service.store import migrate
    from tests.callbacks.receiver import Receiver

    store = f"sqlite:///{(tmp_path / 'reuse.sqlite').resolve()}"
    migrate(store)
    receiver = Receiver("reuse-secret").start()
    try:
        service = live_service(store, redis_url, workers=1, env={
            "DRAWYARD_CALLBACK_ALLOW": receiver.base_url + "/",
            "DRAWYARD_CALLBACK_SECRET": "reuse-secret",
        })  # fmt: skip
        client = DrawyardClient(service.base_url)
        body = normal_mean(chains=2, warmup=100, draws=100, seed=41)
        first = client.submit(body)
        assert wait_for_job(client, first.id, interval=0.2, timeout=300).state == "succeeded"
        reused = client.submit({**body, "notify": {"url": receiver.base_url + "/nightly"}})
        assert reused.state == "succeeded" and reused.raw["reused_from"] == first.id
        deadline = time.monotonic() + 60
        while not receiver.for_path("/nightly"):
            assert time.monotonic() < deadline, service.logs()
            time.sleep(0.2)
        (delivery,) = receiver.for_path("/nightly")
        assert delivery.signature_valid and delivery.answered == 200
        (document,) = receiver.documents("/nightly")
        assert document["id"] == reused.id and document["state"] == "succeeded"
    finally:
        receiver.stop()
