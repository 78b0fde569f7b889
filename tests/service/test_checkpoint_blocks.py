"""Incremental checkpoints on SQLite and PostgreSQL: what each checkpoint writes, the fencing of
block writes by the lease, and the upgrade of a store holding an old-style (version 1) snapshot.

References: the engine's own uninterrupted run (worker.runner.start_chain then run) for the same
body and seed, since a chain's draws depend only on the body and the seed (DEVELOPERS.md,
samplers); for the bytes, the raw size of the rows a block covers (8 bytes per float64 and
int64 value, 1 per bool: numpy's item sizes).
"""

from __future__ import annotations

import io
import json
from datetime import timedelta
from typing import Any

import numpy as np
from alembic import command
from sqlalchemy import event, select, text

from service.app import create_app
from service.chain_work import ChainMonitor, run_chain, take_lease
from service.finishing import finish
from service.store import migrate
from service.store.arrays import decode_array, encode_array
from service.store.engine import make_engine
from service.store.migrate import alembic_config
from service.store.models import Chain, ChainArray, CheckpointBlock, utc_now
from tests.service.bodies import normal_mean
from worker import runner
from worker.samplers import snapshot as snapshot_format

WIDTH = 12  # unknowns of the test model: draws dominate a block's bytes


def wide_body(warmup: int, draws: int, seed: int) -> dict[str, Any]:
    """Twelve normal means with known variance (the model of tests/service/bodies.py, one per
    coordinate), so a block of r iterations holds r x 12 draws."""
    y = [0.1 * i for i in range(WIDTH)]
    return {
        "model": {
            "inputs": {"y": {"type": "real", "shape": [WIDTH]}},
            "unknowns": {"mu": {"shape": [WIDTH]}},
            "priors": [
                {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 10}}
            ],
            "likelihood": [
                {"name": "obs", "observed": "y", "distribution": "normal",
                 "arguments": {"location": "mu", "scale": 1}}
            ],
        },
        "data": {"y": y},
        "sampler": {"chains": 1, "warmup_iterations": warmup, "draws": draws, "seed": seed},
    }  # fmt: skip


def raw_record_bytes(start: int, stop: int, warmup: int) -> int:
    """Bytes of the rows of iterations start..stop: per warm-up iteration the seven NUTS
    statistics (six of 8 bytes, one bool); per sampling iteration those plus WIDTH draws."""
    statistics = 6 * 8 + 1
    warm = max(0, min(stop, warmup) - start)
    sampling = (stop - start) - warm
    return warm * statistics + sampling * (statistics + WIDTH * 8)


class WriteLog:
    """Every bytes parameter the store's engine sends, by what it is: a checkpoint block, the
    chain's checkpoint state, or anything else (the final draws)."""

    def __init__(self, engine: Any):
        self.blocks: list[int] = []
        self.states: list[int] = []
        event.listen(engine, "before_cursor_execute", self.seen)

    def seen(self, conn, cursor, statement, parameters, context, executemany) -> None:
        rows = parameters if isinstance(parameters, list) else [parameters]
        values = [  # psycopg wraps bytes in its Binary adapter, which keeps them as .obj
            getattr(value, "obj", value)
            for row in rows
            for value in (row.values() if isinstance(row, dict) else row)
        ]
        sizes = [len(v) for v in values if isinstance(v, bytes | bytearray | memoryview)]
        if "INSERT INTO checkpoint_blocks" in statement:
            self.blocks.extend(sizes)
        elif statement.lstrip().startswith("UPDATE chains"):
            self.states.extend(sizes)


def app_for(database_url: str, redis_url: str, **settings: Any) -> Any:
    return create_app({"database_url": database_url, "broker_url": redis_url, **settings})


def test_each_checkpoint_writes_only_its_new_block_and_the_resume_is_exact(
    database_url: str, redis_url: str
) -> None:
    warmup, draws, every = 200, 1800, 100
    app = app_for(
        database_url, redis_url, checkpoint_every=every, checkpoint_seconds=0,
        progress_interval=0.02,
    )  # fmt: skip
    runtime = app.extensions["drawyard"]
    body = wide_body(warmup, draws, seed=611)
    job = app.test_client().post("/v1/jobs", json=body).get_json()
    writes = WriteLog(runtime.engine)
    assert run_chain(runtime, job["id"], 0).status == "succeeded"
    event.remove(runtime.engine, "before_cursor_execute", writes.seen)

    checkpoints = (warmup + draws) // every - 1  # none after the last iteration
    assert len(writes.blocks) == checkpoints
    # each block is the rows since the checkpoint before, plus a fixed overhead (the archive's
    # entry headers, under 8 KB), whatever iteration the chain had reached
    for k, size in enumerate(writes.blocks):
        raw = raw_record_bytes(k * every, (k + 1) * every, warmup)
        assert raw <= size <= raw + 8192, (k, size, raw)
    # the state does not grow with the chain: its largest write is within 1 KB of its smallest
    assert writes.states and max(writes.states) - min(writes.states) < 1024
    everything = raw_record_bytes(0, warmup + draws, warmup)
    # linear: all checkpoint writes together stay within the chain's records plus a fixed cost
    # per checkpoint; a full snapshot each time would have written about checkpoints / 2 times
    # the records
    assert sum(writes.blocks) + sum(writes.states) < everything + checkpoints * (
        max(writes.states) + 8192
    )
    with runtime.sessions() as session:
        assert session.scalar(select(CheckpointBlock.id).limit(1)) is None  # gone once stored
    assert finish(runtime, job["id"]) == "succeeded"
    expected = runner.start_chain(body, 0).run().values
    assert np.array_equal(stored_draws(runtime, job["id"]).view("u8"), expected.view("u8"))


def test_a_worker_that_lost_its_lease_appends_no_block(database_url: str, redis_url: str):
    """The monitor of a delivery whose lease another took writes nothing: its fenced UPDATE
    matches no row, so the blocks it holds are not inserted."""
    app = app_for(database_url, redis_url, lease_seconds=1)
    runtime = app.extensions["drawyard"]
    body = wide_body(50, 100, seed=612)
    job = app.test_client().post("/v1/jobs", json=body).get_json()
    stale = take_lease(runtime, job["id"], 0)
    assert stale is not None
    chain_run = runner.start_chain(stale.body, 0)
    monitor = ChainMonitor(runtime, stale)
    chain_run.run(checkpoint=monitor.checkpoint, checkpoint_every=40, incremental=True)
    with runtime.sessions() as session, session.begin():
        session.execute(  # the lease lapses and another delivery takes it
            Chain.__table__.update()
            .where(Chain.id == stale.chain_id)
            .values(lease_expires_at=utc_now() - timedelta(seconds=5))
        )
    taker = take_lease(runtime, job["id"], 0)
    assert taker is not None and taker.token != stale.token
    monitor.flush()
    assert monitor.stop_reason == "lease_lost"
    with runtime.sessions() as session:
        assert session.scalar(select(CheckpointBlock.id).limit(1)) is None
        assert session.scalar(select(Chain.checkpoint).where(Chain.id == stale.chain_id)) is None
    # the holder's own checkpoint is written, blocks and state in one transaction
    held = ChainMonitor(runtime, taker)
    runner.start_chain(taker.body, 0).run(
        checkpoint=held.checkpoint, checkpoint_every=40, incremental=True,
        should_stop=lambda: held._blocks and held._blocks[-1].iteration >= 80,
    )  # fmt: skip
    held.flush()
    with runtime.sessions() as session:
        spans = session.execute(
            select(CheckpointBlock.start_iteration, CheckpointBlock.stop_iteration)
            .where(CheckpointBlock.chain_id == taker.chain_id)
            .order_by(CheckpointBlock.start_iteration)
        ).all()
        at = session.scalar(select(Chain.checkpoint_iteration).where(Chain.id == taker.chain_id))
    assert [tuple(s) for s in spans] == [(0, 40), (40, 80)] and at == 80


def version_one_snapshot(blob: bytes) -> bytes:
    """The snapshot a release before 0009 wrote: the same arrays (every record so far) and a
    header of version 1 without ``records_from`` (worker/samplers/snapshot.py before 0009)."""
    header, arrays = snapshot_format.decode(blob)
    assert header.pop("records_from") == 0
    header["version"] = 1
    text_bytes = json.dumps(header, sort_keys=True).encode("utf-8")
    buffer = io.BytesIO()
    np.savez(buffer, **arrays, header_json=np.frombuffer(text_bytes, dtype=np.uint8))
    return buffer.getvalue()


def stored_draws(runtime: Any, job_id: str) -> np.ndarray:
    with runtime.sessions() as session:
        (row,) = session.scalars(
            select(ChainArray)
            .join(Chain, Chain.id == ChainArray.chain_id)
            .where(Chain.job_id == job_id, ChainArray.kind == "draws")
        ).all()
    return decode_array(row.data, row.sha256)


def test_upgrade_from_0008_resumes_an_old_style_snapshot_exactly(
    unmigrated_url: str, redis_url: str
) -> None:
    body = normal_mean(chains=1, warmup=100, draws=300, seed=613)
    first = runner.start_chain(body, 0)
    first.run(should_stop=lambda: first.chain.iteration >= 250)
    old = version_one_snapshot(first.snapshot())
    assert snapshot_format.decode(old)[0]["version"] == 1
    config = alembic_config(unmigrated_url)
    engine = make_engine(unmigrated_url)
    with engine.begin() as connection:
        config.attributes["connection"] = connection
        command.upgrade(config, "0008")
    job_id = "1" * 32
    past = utc_now() - timedelta(minutes=5)
    with engine.begin() as connection:
        connection.execute(
            text(
                "INSERT INTO jobs (id, state, created_at, started_at, chain_count, seed, body, "
                "settings, labels, request_sha256, spec_sha256, data_sha256, api_software) "
                "VALUES (:id, 'running', :t, :t, 1, 613, :body, :settings, '{}', :h, :h, :h, "
                "'{}')"
            ),
            {"id": job_id, "t": past, "body": json.dumps(body), "h": "0" * 64,
             "settings": json.dumps(runner.resolve_sampler(body["sampler"]))},
        )  # fmt: skip
        connection.execute(
            text(
                "INSERT INTO chains (job_id, chain_index, state, lease_token, lease_expires_at, "
                "attempts, duplicate_deliveries, iteration, iterations_total, divergences, "
                "updated_at, started_at, checkpoint, checkpoint_iteration, checkpoint_at) VALUES "
                "(:id, 0, 'running', :token, :t, 1, 0, 250, 400, 0, :t, :t, :blob, 250, :t)"
            ),
            {"id": job_id, "token": "f" * 32, "t": past, "blob": old},
        )
        # a finished chain's stored array, as the service before 0009 wrote it: it must read
        # back unchanged after the upgrade (which rebuilds chain_arrays on SQLite)
        kept = np.arange(12.0).reshape(4, 3) / 7
        encoded = encode_array(kept)
        chain_row = connection.execute(text("SELECT id FROM chains WHERE job_id = :id"),
                                       {"id": job_id}).scalar_one()  # fmt: skip
        connection.execute(
            text(
                "INSERT INTO chain_arrays (chain_id, kind, name, columns, encoding, dtype, shape, "
                "sha256, data, column_types) VALUES (:c, 'stat', 'earlier', NULL, 'npy+zlib', "
                "'<f8', '[4, 3]', :h, :d, NULL)"
            ),
            {"c": chain_row, "h": encoded.sha256, "d": bytes(encoded.data)},
        )
    engine.dispose()
    migrate(unmigrated_url)
    check = make_engine(unmigrated_url)
    with check.connect() as connection:
        row = connection.execute(
            text("SELECT data, sha256 FROM chain_arrays WHERE name = 'earlier'")
        ).one()
        assert np.array_equal(decode_array(bytes(row.data), row.sha256), kept)
        if check.dialect.name == "sqlite":
            columns = [r[1] for r in connection.execute(text("PRAGMA table_info(chain_arrays)"))]
            assert columns[-1] == "data"
    check.dispose()
    app = app_for(unmigrated_url, redis_url)
    runtime = app.extensions["drawyard"]
    assert run_chain(runtime, job_id, 0).status == "succeeded"
    with runtime.sessions() as session:
        detail = session.execute(
            text("SELECT detail FROM events WHERE job_id = :id AND kind = 'chain_state' "
                 "AND state = 'running'"), {"id": job_id}
        ).scalar_one()  # fmt: skip
    detail = json.loads(detail) if isinstance(detail, str) else detail
    assert detail["resumed_from_iteration"] == 250
    assert finish(runtime, job_id) == "succeeded"
    expected = runner.start_chain(body, 0).run().values
    assert np.array_equal(stored_draws(runtime, job_id).view("u8"), expected.view("u8"))
