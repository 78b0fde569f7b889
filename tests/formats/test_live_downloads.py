"""Parquet and .npz over real HTTP (gunicorn, a real Celery worker, Redis, SQLite and
PostgreSQL stores): the files equal the JSON draws bit for bit (17 significant digits round-trip
an IEEE 754 double; common practice), and If-None-Match with the strong ETag gets 304 with no body
(RFC 9110 sections 13.1.2 and 15.4.5)."""

from __future__ import annotations

import io
import time

import numpy as np
import pyarrow.parquet as pq
import requests

from tests.formats.conftest import two_quantity_body


def test_downloads_over_http_match_the_json_draws(database_url, redis_url, live_service) -> None:
    service = live_service(database_url, redis_url, workers=1)
    base = service.base_url
    job_id = requests.post(base + "/v1/jobs", json=two_quantity_body(), timeout=30).json()["id"]
    deadline = time.monotonic() + 180
    while requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()["state"] != "succeeded":
        assert time.monotonic() < deadline, service.logs()
        time.sleep(0.3)
    document = requests.get(f"{base}/v1/jobs/{job_id}/draws", timeout=30).json()
    expected = np.concatenate([np.asarray(c["draws"], np.float64) for c in document["chains"]])

    url = f"{base}/v1/jobs/{job_id}/draws?format=parquet"
    response = requests.get(url, timeout=30)
    assert response.headers.get("Transfer-Encoding") == "chunked"  # streamed, no length up front
    table = pq.read_table(io.BytesIO(response.content))
    got = np.column_stack([table[n].to_numpy() for n in document["quantities"]])
    assert np.array_equal(got.view(np.uint64), expected.view(np.uint64))

    again = requests.get(url, headers={"If-None-Match": response.headers["ETag"]}, timeout=30)
    assert again.status_code == 304 and again.content == b""

    npz = requests.get(f"{base}/v1/jobs/{job_id}/draws?format=npz&layout=long", timeout=30)
    with np.load(io.BytesIO(npz.content), allow_pickle=False) as arrays:
        assert np.array_equal(arrays["value"].view(np.uint64), expected.reshape(-1).view(np.uint64))
