"""The registry and result reuse on SQLite and PostgreSQL: the 0003 -> 0004 upgrade, numbering
under concurrent registrations over real HTTP (gunicorn, several processes and threads), and the
in-database copy of a reused result.

What is relied on is what the engines promise for a unique constraint: of concurrent inserts of
the same key exactly one commits and the others fail (PostgreSQL 15 documentation, section 5.4.3
"Unique Constraints"; SQLite documentation, "CREATE TABLE", UNIQUE constraints), so retrying
with the next number can never leave two rows with one number.
"""

from __future__ import annotations

import json
import threading

import requests
from alembic import command
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine, func, inspect, select, text

from service.app import create_app
from service.chain_work import run_chain
from service.finishing import finish
from service.store import migrate
from service.store.migrate import alembic_config
from service.store.models import Chain, ChainArray, ModelVersion
from tests.service.bodies import normal_mean
from tests.service.store_probe import store_at_revision_with_a_job

SPEC = normal_mean()["model"]



def test_upgrade_from_0003_keeps_existing_jobs_and_adds_the_registry(unmigrated_url: str):
    job_id = store_at_revision_with_a_job(unmigrated_url, "0003")
    config = alembic_config(unmigrated_url)
    migrate(unmigrated_url)
    engine = create_engine(unmigrated_url)
    try:
        with engine.connect() as connection:
            assert connection.execute(text("SELECT version_num FROM alembic_version")).scalar() == (
                ScriptDirectory.from_config(config).get_current_head()
            )
            columns = {c["name"] for c in inspect(connection).get_columns("jobs")}
            assert {"model_name", "model_version", "run_sha256", "reused_from",
                    "warm_start_from"} <= columns  # fmt: skip
            assert "model_versions" in inspect(connection).get_table_names()
            row = connection.execute(
                text("SELECT state, run_sha256, reused_from FROM jobs WHERE id = :id"),
                {"id": job_id},
            ).one()
            assert tuple(row) == ("succeeded", None, None)
        with engine.begin() as connection:
            command.downgrade(_with(config, connection), "0003")
            assert "model_versions" not in inspect(connection).get_table_names()
    finally:
        engine.dispose()


def _with(config, connection):
    config.attributes["connection"] = connection
    return config


def test_concurrent_registrations_over_http_never_share_a_number(
    database_url: str, redis_url: str, live_service
):
    service = live_service(database_url, redis_url, workers=0)
    url = f"{service.base_url}/v1/models/demand/versions"
    specs = []
    for scale in range(1, 9):
        spec = json.loads(json.dumps(SPEC))
        spec["priors"][0]["arguments"]["scale"] = scale
        specs.append(spec)
    # Eight different specs and four copies of one of them, all at once.
    bodies = [*specs, *[specs[0]] * 4]
    answers: list[requests.Response] = []
    start = threading.Barrier(len(bodies))

    def send(body):
        start.wait()
        answers.append(requests.post(url, json={"model": body}, timeout=60))

    threads = [threading.Thread(target=send, args=(b,)) for b in bodies]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=120)
    assert sorted(a.status_code for a in answers) == [200] * 4 + [201] * 8, [
        a.text for a in answers if a.status_code >= 300
    ]
    by_hash = {}
    for answer in answers:
        doc = answer.json()
        by_hash.setdefault(doc["sha256"], set()).add(doc["version"])
    assert all(len(numbers) == 1 for numbers in by_hash.values()) and len(by_hash) == 8
    assert sorted(n for numbers in by_hash.values() for n in numbers) == list(range(1, 9))
    engine = create_engine(database_url)
    try:
        with engine.connect() as connection:
            count = connection.execute(select(func.count()).select_from(ModelVersion)).scalar()
        assert count == 8
    finally:
        engine.dispose()


def test_a_reused_result_is_copied_inside_the_database(database_url: str, redis_url: str):
    app = create_app({"database_url": database_url, "broker_url": redis_url})
    runtime = app.extensions["drawyard"]
    try:
        client = app.test_client()
        body = normal_mean(chains=2, warmup=100, draws=100, seed=21)
        first = client.post("/v1/jobs", json=body).get_json()
        for index in range(2):
            assert run_chain(runtime, first["id"], index).status == "succeeded"
        assert finish(runtime, first["id"]) == "succeeded"
        again = client.post("/v1/jobs", json=body)
        assert again.status_code == 202 and again.get_json()["reused_from"] == first["id"]
        second = again.get_json()["id"]

        def arrays(job_id):
            with runtime.sessions() as session:
                rows = session.execute(
                    select(Chain.chain_index, ChainArray.kind, ChainArray.name, ChainArray.sha256,
                           ChainArray.data)
                    .join(Chain, Chain.id == ChainArray.chain_id)
                    .where(Chain.job_id == job_id)
                    .order_by(Chain.chain_index, ChainArray.kind, ChainArray.name)
                ).all()  # fmt: skip
            return [tuple(row) for row in rows]

        assert arrays(second) == arrays(first["id"]) and len(arrays(first["id"])) > 2
        assert client.get(f"/v1/jobs/{second}/summary").get_json()["quantities"] == (
            client.get(f"/v1/jobs/{first['id']}/summary").get_json()["quantities"]
        )
    finally:
        runtime.close()
