"""Every download column in its natural type, the same whichever format and reader (pandas and
pyarrow, as a pipeline loads them): chain and draw int64, real quantities float64, whole-number
quantities (replicates of a Poisson term, an integer formula) int64, and the sampler statistics
divergent bool, doublings and gradient_calls int64. The table is docs/formats.md's.

The model is a Poisson count model of our own (invented counts); the chains run in this process
through the functions the Celery tasks call, as in tests/formats/conftest.py.
"""

from __future__ import annotations

import io
import json
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from flask import Flask

from service.app import create_app
from service.chain_work import run_chain
from service.finishing import finish
from service.store import migrate

COUNTS = [3, 1, 4, 1, 5, 2]
BODY = {
    "model": {
        "inputs": {"n": {"type": "integer"},
                   "visits": {"type": "integer", "shape": ["n"]}},
        "unknowns": {"rate": {"lower": 0}},
        "priors": [{"on": "rate", "distribution": "gamma",
                    "arguments": {"shape": 2, "rate": 1}}],
        "likelihood": [{"name": "visits", "observed": "visits", "distribution": "poisson",
                        "arguments": {"rate": "rate"}}],
        "per_draw": {"replicates": ["visits"], "formulas": {"doubled_n": "2 * n",
                                                            "rate_half": "rate / 2"}},
    },
    "data": {"n": len(COUNTS), "visits": COUNTS},
    "sampler": {"chains": 2, "warmup_iterations": 100, "draws": 60, "seed": 7},
}  # fmt: skip

DRAWS = {"chain": "int64", "draw": "int64", "rate": "float64", "doubled_n": "int64",
         "rate_half": "float64", **{f"replicate.visits[{i}]": "int64" for i in range(1, 7)}}
STATS = {"chain": "int64", "draw": "int64", "divergent": "bool", "doublings": "int64",
         "gradient_calls": "int64", "step_size": "float64", "energy": "float64",
         "accept_probability": "float64"}  # fmt: skip


@pytest.fixture(scope="module")
def finished(tmp_path_factory: pytest.TempPathFactory, redis_server) -> Iterator[tuple]:
    folder: Path = tmp_path_factory.mktemp("types")
    url = f"sqlite:///{(folder / 'types.sqlite').resolve()}"
    migrate(url)
    app: Flask = create_app({"database_url": url, "broker_url": redis_server.url})
    client = app.test_client()
    response = client.post("/v1/jobs", json=BODY)
    assert response.status_code == 202, response.get_data(as_text=True)
    job_id = response.get_json()["id"]
    runtime = app.extensions["drawyard"]
    for index in range(2):
        assert run_chain(runtime, job_id, index).status
    finish(runtime, job_id)
    yield client, job_id
    runtime.close()


def _get(client, job_id: str, resource: str, format_name: str) -> bytes:
    response = client.get(f"/v1/jobs/{job_id}/{resource}?format={format_name}")
    assert response.status_code == 200, response.get_data(as_text=True)
    return response.get_data()


def _expected(resource: str, columns: list[str]) -> dict[str, str]:
    table = DRAWS if resource == "draws" else STATS
    return {name: table[name] for name in columns if name in table}


@pytest.mark.parametrize("resource", ["draws", "sampler-stats"])
def test_csv_parquet_json_and_npz_agree_on_every_column_type(finished, resource: str) -> None:
    client, job_id = finished
    frames = {
        "csv/pandas": pd.read_csv(io.BytesIO(_get(client, job_id, resource, "csv"))),
        "parquet/pandas": pd.read_parquet(io.BytesIO(_get(client, job_id, resource, "parquet"))),
    }
    arrow_csv = pacsv.read_csv(io.BytesIO(_get(client, job_id, resource, "csv")))
    arrow_parquet = pq.read_table(io.BytesIO(_get(client, job_id, resource, "parquet")))
    columns = list(frames["csv/pandas"].columns)
    expected = _expected(resource, columns)
    assert set(expected) >= {"chain", "draw"} and len(expected) >= 5
    for reader, frame in frames.items():
        found = {name: str(frame[name].dtype) for name in expected}
        assert found == expected, reader
    for reader, table in (("csv/pyarrow", arrow_csv), ("parquet/pyarrow", arrow_parquet)):
        found = {name: table.schema.field(name).type.to_pandas_dtype().__name__
                 for name in expected}  # fmt: skip
        assert {k: v.replace("bool_", "bool") for k, v in found.items()} == expected, reader
    # JSON: whole numbers as JSON integers, yes/no as true/false
    document = json.loads(_get(client, job_id, resource, "json"))
    names = document["quantities" if resource == "draws" else "statistics"]
    row = document["chains"][0]["draws"][0]
    python = {"float64": float, "int64": int, "bool": bool}
    for name, cell in zip(names, row, strict=True):
        if name in expected:
            assert type(cell) is python[expected[name]], name
    # npz: chain and draw int64, and each column's natural type named beside the matrix
    with np.load(io.BytesIO(_get(client, job_id, resource, "npz")), allow_pickle=False) as npz:
        assert npz["chain"].dtype == np.int64 and npz["draw"].dtype == np.int64
        named = dict(zip(npz[("quantities" if resource == "draws" else "statistics")].tolist(),
                         npz["types"].tolist(), strict=True))  # fmt: skip
        assert {k: named[k] for k in expected if k in named} == {
            k: v for k, v in expected.items() if k not in ("chain", "draw")
        }


def test_whole_number_columns_hold_the_values_of_the_float_matrix(finished) -> None:
    """The cast loses nothing: the int64 Parquet columns equal the npz float64 matrix."""
    client, job_id = finished
    table = pq.read_table(io.BytesIO(_get(client, job_id, "draws", "parquet")))
    with np.load(io.BytesIO(_get(client, job_id, "draws", "npz")), allow_pickle=False) as npz:
        names, values = npz["quantities"].tolist(), npz["values"]
    for i, name in enumerate(names):
        np.testing.assert_array_equal(table[name].to_numpy().astype(np.float64), values[:, i])
    replicates = values[:, [i for i, n in enumerate(names) if n.startswith("replicate.")]]
    assert (replicates >= 0).all() and (replicates == np.round(replicates)).all()


def test_plain_names_load_unquoted_and_the_served_mapping_names_them(finished) -> None:
    client, job_id = finished
    listed = client.get(f"/v1/jobs/{job_id}/columns").get_json()
    mapping = {c["name"]: c["plain"] for c in listed["draws"]}
    assert mapping["replicate.visits[1]"] == "replicate_visits_1"
    assert {c["name"]: c["type"] for c in listed["draws"]} == DRAWS
    assert {c["name"]: c["type"] for c in listed["sampler_stats"]
            if c["name"] in STATS} == STATS  # fmt: skip
    response = client.get(f"/v1/jobs/{job_id}/draws?format=parquet&names=plain")
    plain = pq.read_table(io.BytesIO(response.get_data()))
    display = pq.read_table(io.BytesIO(_get(client, job_id, "draws", "parquet")))
    assert plain.column_names == [mapping.get(n, n) for n in display.column_names]
    assert all(n.replace("_", "").isalnum() for n in plain.column_names)
    for name in display.column_names:
        assert plain[mapping.get(name, name)].equals(display[name])
    # A SQL engine takes them unquoted: sqlite3 from the standard library.
    frame = pd.read_csv(io.BytesIO(
        client.get(f"/v1/jobs/{job_id}/draws?format=csv&names=plain").get_data()
    ))  # fmt: skip
    with sqlite3.connect(":memory:") as connection:
        frame.to_sql("draws", connection, index=False)
        (total,) = connection.execute(
            "SELECT SUM(replicate_visits_1) FROM draws WHERE chain = 1"
        ).fetchone()
    chain = display["chain"].to_numpy()
    assert total == int(display["replicate.visits[1]"].to_numpy()[chain == 1].sum())
    refused = client.get(f"/v1/jobs/{job_id}/draws?names=short")
    assert refused.status_code == 400
    assert refused.get_json()["errors"][0]["parameter"] == "names"
