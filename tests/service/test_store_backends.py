"""The results store on SQLite and on PostgreSQL (the harness's `database_url` fixture gives both).

What is checked is what the SQL engines promise: a conditional UPDATE changes a row for exactly one
of several concurrent transactions (SQLite: one writer at a time, "File Locking And Concurrency In
SQLite Version 3"; PostgreSQL 15 documentation, section 13.2.1: an UPDATE that waited on a
concurrent one re-checks its WHERE clause against the updated row). So exactly one caller wins a
lease or the right to finish a job, whatever the interleaving. WAL mode and the busy timeout are
read back with PRAGMA (SQLite documentation, "PRAGMA journal_mode", "PRAGMA busy_timeout").
"""

from __future__ import annotations

import threading
import uuid
from datetime import timedelta
from types import SimpleNamespace

import numpy as np
import pytest
from alembic.script import ScriptDirectory
from sqlalchemy import inspect, select, text, update

from service.chain_work import claim_finish, end_chain, store_result, take_lease
from service.config import load_settings
from service.job_queries import JobFilter, list_jobs
from service.runtime import Runtime, build_runtime
from service.store import migrate
from service.store.arrays import decode_array
from service.store.migrate import alembic_config
from service.store.models import Chain, ChainArray, Event, Job, JobLabel, utc_now
from service.timestamps import rfc3339


@pytest.fixture
def runtime(database_url: str):
    runtime = build_runtime(load_settings({"database_url": database_url, "lease_seconds": 60}))
    yield runtime
    runtime.close()


def insert_job(runtime: Runtime, chains: int = 2, labels: dict | None = None) -> str:
    job_id = uuid.uuid4().hex
    now = utc_now()
    with runtime.sessions() as session, session.begin():
        session.add(
            Job(
                id=job_id,
                state="queued",
                created_at=now,
                chain_count=chains,
                seed=1,
                body={"model": {}, "sampler": {"seed": 1}},
                settings={},
                labels=labels or {},
                request_sha256="0" * 64,
                spec_sha256="0" * 64,
                data_sha256="0" * 64,
                api_software={},
            )
        )
        session.flush()
        session.add_all(JobLabel(job_id=job_id, key=k, value=v) for k, v in (labels or {}).items())
        session.add_all(
            Chain(
                job_id=job_id,
                chain_index=i,
                state="queued",
                attempts=0,
                duplicate_deliveries=0,
                iteration=0,
                divergences=0,
                iterations_total=10,
                updated_at=now,
            )
            for i in range(chains)
        )
    return job_id


def chain_row(runtime: Runtime, job_id: str, index: int) -> Chain:
    with runtime.sessions() as session:
        return session.scalars(
            select(Chain).where(Chain.job_id == job_id, Chain.chain_index == index)
        ).one()


def race(count: int, action) -> list:
    """Run ``action`` on ``count`` threads released together; their results in thread order."""
    barrier = threading.Barrier(count)
    results: list = [None] * count

    def worker(i: int) -> None:
        barrier.wait()
        results[i] = action()

    threads = [threading.Thread(target=worker, args=(i,)) for i in range(count)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=60)
    return results


def fake_result(draws: np.ndarray):
    return SimpleNamespace(
        names=["a", "b"],
        values=draws,
        completed=True,
        adapted={"step_size": np.float64(0.5)},
        stats={
            "divergent": np.zeros(draws.shape[0], bool),
            "doublings": np.arange(draws.shape[0]),
        },
    )


def test_migrate_reaches_the_newest_revision_and_is_repeatable(database_url: str) -> None:
    migrate(database_url)  # the fixture migrated once already; again must be a no-op
    runtime = build_runtime(load_settings({"database_url": database_url}))
    try:
        head = ScriptDirectory.from_config(alembic_config(database_url)).get_current_head()
        with runtime.engine.connect() as connection:
            assert (
                connection.execute(text("SELECT version_num FROM alembic_version")).scalar() == head
            )
            tables = set(inspect(connection).get_table_names())
            if runtime.engine.dialect.name == "sqlite":
                assert connection.execute(text("PRAGMA journal_mode")).scalar() == "wal"
                assert connection.execute(text("PRAGMA busy_timeout")).scalar() >= 1000
        assert {"jobs", "chains", "chain_arrays", "events", "job_labels"} <= tables
    finally:
        runtime.close()


def test_only_one_of_many_concurrent_deliveries_takes_the_lease(runtime: Runtime) -> None:
    job_id = insert_job(runtime)
    leases = race(6, lambda: take_lease(runtime, job_id, 0))
    winners = [lease for lease in leases if lease is not None]
    assert len(winners) == 1
    chain = chain_row(runtime, job_id, 0)
    assert chain.state == "running" and chain.attempts == 1
    assert chain.duplicate_deliveries == 5 and chain.lease_token == winners[0].token
    with runtime.sessions() as session:
        assert session.scalar(select(Job.state).where(Job.id == job_id)) == "running"


def test_an_expired_lease_passes_on_and_fences_out_the_old_holder(runtime: Runtime) -> None:
    job_id = insert_job(runtime)
    old = take_lease(runtime, job_id, 1)
    assert take_lease(runtime, job_id, 1) is None  # still held
    with runtime.sessions() as session, session.begin():
        session.execute(
            update(Chain)
            .where(Chain.job_id == job_id, Chain.chain_index == 1)
            .values(lease_expires_at=utc_now() - timedelta(seconds=1))
        )
    new = take_lease(runtime, job_id, 1)
    assert new is not None and new.token != old.token and new.attempt == 2
    monitor = SimpleNamespace(phase="sampling", divergences=0,
                              divergence_counts=lambda: {"divergences": 0})
    draws = np.arange(20.0).reshape(10, 2)
    assert store_result(runtime, old, fake_result(draws), monitor) is False
    assert end_chain(runtime, old, "failed", "stale") is False
    assert store_result(runtime, new, fake_result(draws), monitor) is True
    chain = chain_row(runtime, job_id, 1)
    assert chain.state == "succeeded" and chain.attempts == 2 and chain.error is None
    with runtime.sessions() as session:
        rows = session.scalars(select(ChainArray).where(ChainArray.chain_id == chain.id)).all()
    stored = {row.name: decode_array(row.data, row.sha256) for row in rows}
    assert np.array_equal(stored["draws"], draws) and stored["draws"].dtype == np.float64
    assert stored["divergent"].dtype == np.bool_ and np.array_equal(
        stored["doublings"], np.arange(10)
    )
    assert chain.adapted == {"step_size": 0.5}


def test_exactly_one_caller_claims_the_finish_once_every_chain_has_ended(
    runtime: Runtime,
) -> None:
    job_id = insert_job(runtime, chains=3)
    leases = [take_lease(runtime, job_id, i) for i in range(3)]
    end_chain(runtime, leases[0], "succeeded", None)
    end_chain(runtime, leases[1], "succeeded", None)
    assert race(4, lambda: claim_finish(runtime, job_id)) == [False] * 4  # chain 3 still running
    end_chain(runtime, leases[2], "failed", "boom")
    claims = race(6, lambda: claim_finish(runtime, job_id))
    assert claims.count(True) == 1
    assert claim_finish(runtime, job_id) is False


def test_events_are_kept_in_order_with_utc_timestamps(runtime: Runtime) -> None:
    job_id = insert_job(runtime, chains=1)
    lease = take_lease(runtime, job_id, 0)
    end_chain(runtime, lease, "cancelled", None)
    with runtime.sessions() as session:
        events = session.scalars(select(Event).where(Event.job_id == job_id).order_by(Event.id))
        rows = [(e.kind, e.chain_index, e.state, e.at) for e in events]
    assert [r[:3] for r in rows] == [
        ("chain_state", 0, "running"),
        ("job_state", None, "running"),
        ("chain_state", 0, "cancelled"),
    ]
    times = [r[3] for r in rows]
    assert times == sorted(times) and all(t.utcoffset() == timedelta(0) for t in times)
    assert rfc3339(times[0]).endswith("Z")


def test_list_filters_and_cursor_pages_on_both_backends(runtime: Runtime) -> None:
    ids = [
        insert_job(runtime, 1, {"team": "red" if i % 3 == 0 else "blue", "i": str(i)})
        for i in range(8)
    ]
    seen, cursor = [], None
    while True:
        page, cursor = list_jobs(runtime, JobFilter(), 3, cursor)
        seen += [job.id for job, _ in page]
        if cursor is None:
            break
    assert seen == ids[::-1]
    red, _ = list_jobs(runtime, JobFilter.parse([], ["team:red"]), 50, None)
    assert [job.id for job, _ in red] == [ids[6], ids[3], ids[0]]
    red_page, next_cursor = list_jobs(runtime, JobFilter.parse([], ["team:red"]), 2, None)
    rest, last = list_jobs(runtime, JobFilter.parse([], ["team:red"]), 2, next_cursor)
    assert [j.id for j, _ in red_page + rest] == [ids[6], ids[3], ids[0]] and last is None
    none, _ = list_jobs(runtime, JobFilter.parse(["succeeded"], []), 50, None)
    assert none == []
