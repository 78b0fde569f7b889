"""`drawyard migrate` across revision 0006 (our own names), on SQLite and PostgreSQL.

A store holds a registered model and a finished job written under the earlier names; after
`drawyard migrate` (the real command, in its own process) the job and the model are served as
before and stay reusable: the same submission under the new names reuses the job's result, a
registration of the same spec finds the existing version, and a warm start from the job runs.

The earlier names are spelled only in the data migration (service/migrations/own_names.py), so
the store under the earlier names is made the way an operator rolling back would make it: a job
is run and registered at the newest revision, then the store is downgraded to 0005 by Alembic,
which rewrites every stored document to the earlier names. The test first checks that no new
name is left anywhere in the downgraded rows (so what the upgrade then reads is the earlier
format throughout), then upgrades with the command and compares every resource with what was
served before. Digests are checked against FIPS 180-4 SHA-256 (hashlib) of canonical JSON.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

from alembic import command
from flask import Flask
from sqlalchemy import select, text

from service.app import create_app
from service.store import migrate
from service.store.engine import make_engine
from service.store.migrate import alembic_config
from service.store.models import Chain, Job
from tests.service.bodies import normal_mean
from tests.service.test_registry_views import call, canonical_sha256, register, run_to_the_end

REPO_ROOT = Path(__file__).resolve().parents[2]
NEW_WORDS = {
    "per_draw", "formulas", "pointwise", "correlation_factor", "running_sum", "cumulative_logit",
    "preconditioning", "per_coordinate", "full", "start_spread", "scales", "covariance",
    "doublings", "gradient_calls", "accept_probability", "mean_error", "sd_error",
    "quantile_errors", "median", "interval",
}  # fmt: skip


def _spec() -> dict[str, Any]:
    """The service tests' normal mean with a positive increasing pair, a running sum and every
    per-draw output, so the rewrite touches each renamed part of a spec."""
    spec = normal_mean()["model"]
    spec["unknowns"]["levels"] = {"shape": [2], "structure": "ordered", "lower": 0}
    spec["priors"].append(
        {"on": "levels", "distribution": "gamma", "arguments": {"shape": 2, "rate": 1}}
    )
    spec["derived"] = {"totals": "running_sum(levels)"}
    spec["per_draw"] = {
        "formulas": {"mu_twice": "2 * mu"},
        "replicates": ["obs"],
        "pointwise": ["obs"],
    }
    return spec


def _body(**members: Any) -> dict[str, Any]:
    """A job by reference to the registered model. Its summary is at the 90% level, the one the
    earlier summary's fixed quantiles (5%, 50%, 95%) amount to, so the store under the earlier
    names can hold it without loss and the same submission reuses it after the upgrade."""
    body = normal_mean(chains=2, warmup=100, draws=100, seed=606)
    del body["model"]
    body["model_ref"] = {"name": "rates", "version": 1}
    body["sampler"].update(preconditioning="full", start_spread=1.5)
    body["summary"] = {"interval": 0.9}
    return {**body, **members}


def _app(url: str, redis_url: str) -> Flask:
    return create_app({"database_url": url, "broker_url": redis_url, "max_body_bytes": 50_000})


def _served(app: Flask, job_id: str) -> dict[str, Any]:
    client = app.test_client()
    served = {}
    for path in ("", "/summary", "/diagnostics", "/draws", "/sampler-stats"):
        response, document = call(client, "GET", f"/v1/jobs/{job_id}{path}")
        assert response.status_code == 200, (path, document)
        served[path] = document
    served["model"] = call(client, "GET", "/v1/models/rates/versions/1")[1]
    served["stored body"] = _stored_body(app, job_id)
    return served


def _stored_body(app: Flask, job_id: str) -> dict:
    with app.extensions["drawyard"].sessions() as session:
        return session.scalar(select(Job.body).where(Job.id == job_id))


def _words(value: Any) -> set[str]:
    """Every key and string value in a JSON document, and each column name's prefix."""
    if isinstance(value, dict):
        return set(value) | {w for v in value.values() for w in _words(v)}
    if isinstance(value, list):
        return {w for v in value for w in _words(v)}
    if isinstance(value, str):
        return {value, value.split(".", 1)[0], value.split("(", 1)[0]}
    return set()


def _downgraded_rows(url: str) -> set[str]:
    engine = make_engine(url)
    try:
        with engine.connect() as connection:
            found: set[str] = set()
            for query in (
                "SELECT body, settings, summary, diagnostics, verdict FROM jobs",
                "SELECT spec FROM model_versions",
                "SELECT adapted FROM chains",
                "SELECT columns FROM chain_arrays",
            ):
                for row in connection.execute(text(query)):
                    for cell in row:
                        found |= _words(json.loads(cell) if isinstance(cell, str) else cell)
            names = connection.execute(text("SELECT name FROM chain_arrays")).scalars()
            return found | set(names)
    finally:
        engine.dispose()


def test_a_job_and_a_model_stored_under_the_earlier_names_are_served_and_reused(
    unmigrated_url: str, redis_url: str
) -> None:
    url = unmigrated_url
    migrate(url)
    app = _app(url, redis_url)
    client = app.test_client()
    spec = _spec()
    response, version = register(client, "rates", spec)
    assert response.status_code == 201 and version["sha256"] == canonical_sha256(spec)
    response, job = call(client, "POST", "/v1/jobs", _body())
    assert response.status_code == 202, job
    run_to_the_end(app, job["id"], 2)
    before = _served(app, job["id"])
    assert "pointwise.obs[8]" in before["/draws"]["quantities"]
    assert "doublings" in before["/sampler-stats"]["statistics"]
    app.extensions["drawyard"].close()

    engine = make_engine(url)
    with engine.begin() as connection:
        config = alembic_config(url)
        config.attributes["connection"] = connection
        command.downgrade(config, "0005")
    engine.dispose()
    left = _downgraded_rows(url) & NEW_WORDS
    assert not left, f"the downgrade left new names in the store: {sorted(left)}"

    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "migrate", "--database-url", url],
        cwd=REPO_ROOT, capture_output=True, text=True, timeout=300,
        env={**os.environ, "PYTHONPATH": str(REPO_ROOT)},
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    app = _app(url, redis_url)
    try:
        client = app.test_client()
        after = _served(app, job["id"])
        for served in (before, after):
            # Below 0008 the store keeps no warm-up divergence count and digests by the earlier
            # scheme, so the way down forgets them; the job keeps digests under the scheme it
            # records (tests/service/test_digest_scheme_upgrade.py checks those verify).
            for chain in served[""]["chains"]:
                chain.pop("warmup_divergences")
            served[""]["model_ref"].pop("sha256")
        for part in before:
            assert after[part] == before[part], part
        # registry identity: the same spec is the existing version, with its digest
        response, again = register(client, "rates", spec)
        assert response.status_code == 200 and again["version"] == 1
        assert again["sha256"] == canonical_sha256(spec)
        # result reuse: the same submission under the new names is the stored job's result
        response, repeat = call(client, "POST", "/v1/jobs", {**_body(), "labels": {"n": "2"}})
        assert response.status_code == 202 and repeat["reused_from"] == job["id"], repeat
        # a warm start from the upgraded job: its records are full-covariance records now
        warm = _body(warm_start={"job": job["id"]})
        warm["sampler"]["seed"] = 607
        response, started = call(client, "POST", "/v1/jobs", warm)
        assert response.status_code == 202, started
        records = _stored_body(app, started["id"])["warm_start"]["chains"]
        assert all(r["preconditioning"] == "full" and "covariance" in r for r in records)
        run_to_the_end(app, started["id"], 2)
        with app.extensions["drawyard"].sessions() as session:
            states = session.scalars(select(Chain.state).where(Chain.job_id == started["id"]))
            assert list(states) == ["succeeded", "succeeded"]
    finally:
        app.extensions["drawyard"].close()


def test_a_snapshot_of_a_chain_in_flight_resumes_identically_after_the_rewrite() -> None:
    """A chain stopped mid-run is stored as a snapshot (its settings, statistics and inverse
    metric by name). Rewritten to the earlier names and back, as a downgrade and an upgrade do,
    it must resume to bitwise the draws of the uninterrupted chain (the engine's own guarantee,
    tests/samplers/test_snapshot.py), and the earlier form must hold none of the new names."""
    import io

    import numpy as np

    from service.migrations import own_names
    from tests.samplers.targets import Gaussian
    from worker.samplers import Chain, SamplerSettings

    target = Gaussian(np.array([0.5, -1.0]), np.array([[1.0, 0.6], [0.6, 2.0]]))
    for method, preconditioning in (("nuts", "full"), ("metropolis", "per_coordinate")):
        settings = SamplerSettings(
            method=method, preconditioning=preconditioning, warmup_iterations=60, draws=40
        )
        seed = np.random.SeedSequence(66)
        reference = Chain(target, settings, seed).run()
        chain = Chain(target, settings, seed)
        chain.run(should_stop=lambda c=chain: c.iteration >= 70)
        earlier = own_names.snapshot(chain.snapshot(), forward=False)
        with np.load(io.BytesIO(earlier), allow_pickle=False) as archive:
            header = json.loads(archive["header_json"].tobytes().decode())
            words = set(archive.files) | set(header["settings"]) | {header["settings"][k]
                                                                   for k in header["settings"]}
        assert not {w for w in words if isinstance(w, str)} & (
            NEW_WORDS | {"stat_doublings", "stat_gradient_calls", "stat_accept_probability",
                         "warmup_stat_accept_probability", "preconditioner"}
        )  # fmt: skip
        resumed = Chain.restore(target, own_names.snapshot(earlier, forward=True)).run()
        assert np.array_equal(resumed.draws, reference.draws)
        assert all(np.array_equal(resumed.stats[k], reference.stats[k]) for k in reference.stats)
        assert resumed.adapted == reference.adapted
