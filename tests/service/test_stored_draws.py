"""Reading stored draws a block of rows, or a quantity, at a time (service/store/arrays.py,
service/stored_draws.py), on SQLite and PostgreSQL.

References: numpy's own .npy reader (np.load of the inflated bytes) for what a stored array
holds, including arrays stored before this change (np.save then zlib.compress, as encode_array
did); and the engine's in-process run (worker.runner.run_in_process), whose summary of the same
chains the service's streamed finishing step must reproduce to the last bit.
"""

from __future__ import annotations

import io
import json
import zlib

import numpy as np
import pytest
from sqlalchemy import select, update

from service.app import create_app
from service.chain_work import run_chain
from service.finishing import finish
from service.store.arrays import decode_array, encode_array, row_blocks
from service.store.models import Chain, ChainArray, Job
from service.stored_draws import StoredDraws
from tests.service.bodies import normal_mean
from worker import runner


def old_encoding(values: np.ndarray) -> bytes:
    """What encode_array stored before: the whole .npy, then zlib at level 6."""
    buffer = io.BytesIO()
    np.save(buffer, values, allow_pickle=False)
    return zlib.compress(buffer.getvalue(), 6)


@pytest.mark.parametrize("shape", [(1000, 7), (0, 3), (4, 0), (70_001, 9)])
def test_row_blocks_give_what_numpy_reads_from_new_and_old_encodings(shape) -> None:
    values = np.random.default_rng(5).normal(size=shape)
    encoded = encode_array(values)
    assert np.array_equal(np.load(io.BytesIO(zlib.decompress(encoded.data))), values)
    assert np.array_equal(decode_array(bytes(encoded.data), encoded.sha256), values)
    for data in (bytes(encoded.data), old_encoding(values)):
        blocks = list(row_blocks(data, 333, encoded.sha256))
        assert all(b.shape[0] <= 333 for b in blocks)
        got = np.concatenate(blocks) if blocks else np.empty((0, shape[1]))
        assert np.array_equal(got.reshape(shape).view("u8"), values.view("u8"))


def test_row_blocks_check_the_checksum() -> None:
    values = np.arange(30.0).reshape(10, 3)
    other = encode_array(values + 1)
    with pytest.raises(ValueError, match="corrupt"):
        list(row_blocks(bytes(encode_array(values).data), 4, other.sha256))


def test_finishing_streams_quantities_and_summarises_as_in_process(
    database_url: str, redis_url: str
) -> None:
    app = create_app({"database_url": database_url, "broker_url": redis_url})
    runtime = app.extensions["drawyard"]
    body = normal_mean(chains=3, warmup=100, draws=250, seed=91)
    body["model"]["per_draw"] = {"formulas": {"twice": "2 * mu"}, "replicates": ["obs"]}
    job = app.test_client().post("/v1/jobs", json=body).get_json()
    for index in range(3):
        assert run_chain(runtime, job["id"], index).status == "succeeded"
    with runtime.sessions() as session:
        chain_ids = session.scalars(
            select(Chain.id).where(Chain.job_id == job["id"]).order_by(Chain.chain_index)
        ).all()
        rows = {
            row.chain_id: decode_array(row.data, row.sha256)
            for row in session.scalars(select(ChainArray).where(ChainArray.kind == "draws"))
        }
    pooled = np.stack([rows[i] for i in chain_ids])
    with StoredDraws(runtime, list(chain_ids)) as draws:
        assert draws.shape == pooled.shape
        for j in range(pooled.shape[2]):
            assert np.array_equal(draws.quantity(j).view("u8"), pooled[:, :, j].view("u8"))
    with StoredDraws(runtime, list(chain_ids), length=17) as prefix:
        assert prefix.shape == (3, 17, pooled.shape[2])
        assert np.array_equal(prefix.quantity(2), pooled[:, :17, 2])
    assert finish(runtime, job["id"]) == "succeeded"
    with runtime.sessions() as session:
        stored = session.scalars(select(Job).where(Job.id == job["id"])).one()
    local = runner.run_in_process(body)
    assert json.dumps(stored.summary) == json.dumps(local["summary"])
    assert stored.verdict == local["verdict"]


def test_a_corrupt_stored_chain_fails_the_finishing_step(database_url: str, redis_url: str):
    app = create_app({"database_url": database_url, "broker_url": redis_url})
    runtime = app.extensions["drawyard"]
    job = app.test_client().post("/v1/jobs", json=normal_mean(chains=1, seed=92)).get_json()
    assert run_chain(runtime, job["id"], 0).status == "succeeded"
    with runtime.sessions() as session, session.begin():
        session.execute(
            update(ChainArray).where(ChainArray.kind == "draws").values(sha256="0" * 64)
        )
    assert finish(runtime, job["id"]) == "failed"
    with runtime.sessions() as session:
        error = session.scalar(select(Job.error).where(Job.id == job["id"]))
    assert "corrupt" in error
