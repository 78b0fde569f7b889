"""Evaluation counts on the chain row, on SQLite and PostgreSQL: the 0004 -> 0005 upgrade, the
counts a worker stores, where the API shows them, and that reused chains carry none.

The reference for the stored counts is the engine run in this process on the same body and chain
(worker/runner.py): a chain's work depends only on the body and its seed, so the worker's counts
must equal them exactly. The reference for the metric counters is plain arithmetic over the rows.
"""

from __future__ import annotations

import pytest
from alembic import command
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine, inspect, select, text

from service import metrics
from service.app import create_app
from service.chain_work import run_chain
from service.evaluation_counts import COLUMNS
from service.finishing import finish
from service.store import migrate
from service.store.engine import make_engine
from service.store.migrate import alembic_config
from service.store.models import Chain
from tests.service.bodies import normal_mean
from tests.service.store_probe import store_at_revision_with_a_job
from worker import runner


def counted(kind: str) -> tuple[float, float]:
    """This process's evaluation counter and its chain-seconds counter for one kind (the tests
    run in one process without PROMETHEUS_MULTIPROC_DIR, so the values are this process's)."""
    found = {
        sample.name: sample.value
        for family in metrics.ProcessMetrics().collect()
        for sample in family.samples
        if sample.labels.get("kind") == kind
    }
    return (
        found.get("drawyard_model_evaluations_total", 0.0),
        found.get("drawyard_evaluating_chain_seconds_total", 0.0),
    )



def test_upgrade_from_0004_keeps_chains_and_leaves_their_counts_null(unmigrated_url: str):
    job_id = store_at_revision_with_a_job(unmigrated_url, "0004")
    config = alembic_config(unmigrated_url)
    engine = make_engine(unmigrated_url)
    with engine.begin() as connection:
        connection.execute(
            text(
                "INSERT INTO chains (job_id, chain_index, state, attempts, duplicate_deliveries, "
                "iteration, iterations_total, divergences, updated_at) VALUES "
                "(:id, 0, 'succeeded', 1, 0, 20, 20, 0, CURRENT_TIMESTAMP)"
            ),
            {"id": job_id},
        )
    engine.dispose()
    migrate(unmigrated_url)
    engine = create_engine(unmigrated_url)
    try:
        with engine.connect() as connection:
            version = connection.execute(text("SELECT version_num FROM alembic_version")).scalar()
            assert version == ScriptDirectory.from_config(config).get_current_head()
            columns = {c["name"] for c in inspect(connection).get_columns("chains")}
            assert set(COLUMNS) <= columns
            row = connection.execute(
                text(f"SELECT state, {', '.join(COLUMNS)} FROM chains WHERE job_id = :id"),
                {"id": job_id},
            ).one()
            assert tuple(row) == ("succeeded", None, None, None, None)
        with engine.begin() as connection:
            config.attributes["connection"] = connection
            command.downgrade(config, "0004")
            columns = {c["name"] for c in inspect(connection).get_columns("chains")}
            assert not set(COLUMNS) & columns
            assert connection.execute(text("SELECT count(*) FROM chains")).scalar() == 1
    finally:
        engine.dispose()


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
def test_stored_counts_are_the_engines_and_reused_chains_have_none(
    database_url: str, redis_url: str, method: str
):
    app = create_app({"database_url": database_url, "broker_url": redis_url})
    runtime = app.extensions["drawyard"]
    try:
        client = app.test_client()
        body = normal_mean(chains=2, warmup=60, draws=40, seed=31, method=method)
        job = client.post("/v1/jobs", json=body).get_json()
        kinds = ("gradient", "log_density")[:: -1 if method == "metropolis" else 1]
        before, before_other = counted(kinds[0]), counted(kinds[1])
        for index in range(2):
            assert run_chain(runtime, job["id"], index).status == "succeeded"
        assert finish(runtime, job["id"]) == "succeeded"

        expected = []
        for index in range(2):
            counts = runner.start_chain(body, index).run().evaluations
            assert counts is not None
            expected.append(counts.as_json())
        if method == "metropolis":
            assert all(sum(e["gradient"].values()) == 0 for e in expected)
        else:
            assert all(e["gradient"]["warmup"] > 0 < e["gradient"]["sampling"] for e in expected)

        resource = client.get(f"/v1/jobs/{job['id']}").get_json()
        assert [c["evaluations"] for c in resource["chains"]] == expected
        audit = client.get(f"/v1/jobs/{job['id']}/audit").get_json()
        assert [c["evaluations"] for c in audit["chains"]] == expected
        report = client.get(f"/v1/jobs/{job['id']}/diagnostics").get_json()["sampler"]
        assert report["gradient_evaluations_per_chain"] == [e["gradient"] for e in expected]
        assert report["log_density_evaluations_per_chain"] == [e["log_density"] for e in expected]

        kind = "log_density" if method == "metropolis" else "gradient"
        after_run = counted(kind)
        again = client.post("/v1/jobs", json=body).get_json()
        assert again["reused_from"] == job["id"]
        reused = client.get(f"/v1/jobs/{again['id']}").get_json()
        # The copies name what the draws cost, as the copied sampler report does ...
        assert [c["evaluations"] for c in reused["chains"]] == expected
        reused_report = client.get(f"/v1/jobs/{again['id']}/diagnostics").get_json()["sampler"]
        assert reused_report["gradient_evaluations_per_chain"] == [e["gradient"] for e in expected]
        # ... but no worker ran the reused chains: the counters hold the original chains alone.
        assert counted(kind) == after_run
        with runtime.sessions() as session:
            rows = session.execute(
                select(Chain.started_at, Chain.finished_at).where(Chain.job_id == job["id"])
            ).all()
        seconds = sum((finished - started).total_seconds() for started, finished in rows)
        total = sum(sum(e[kind].values()) for e in expected)
        assert after_run[0] - before[0] == total
        assert abs((after_run[1] - before[1]) - seconds) < 1e-6
        other = "gradient" if kind == "log_density" else "log_density"
        assert counted(other) == before_other
    finally:
        runtime.close()
