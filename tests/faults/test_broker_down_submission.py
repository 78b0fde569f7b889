"""A submission the broker refuses does not keep its Idempotency-Key: the retry after the 503 runs.

Real parts: gunicorn, a Celery worker, the closing worker, the sweeper, a real Redis (stopped and
started again on the same port) and a SQLite store. Issue 13 item 10: the failed job held the key,
so the client's retry got that failed job back (200) and the work never ran; and its stored error
carried the broker's internal address. Retrying a refused request with the same key is the
client behaviour the Idempotency-Key draft describes (IETF httpapi-idempotency-key-header,
section 2; from memory).
"""

from __future__ import annotations

import json
import time

import pytest
import requests

from service.store import migrate
from tests.conftest import sqlite_url
from tests.service.bodies import normal_mean

pytestmark = pytest.mark.services


def test_a_retry_after_a_503_runs_the_job_and_no_address_leaks(redis_server, live_service,
                                                               tmp_path):
    store = sqlite_url(tmp_path / "store.sqlite")
    migrate(store)
    service = live_service(store, redis_server.url, workers=1)
    base, key = service.base_url, "order-20261203-a"
    body = normal_mean(chains=1, warmup=50, draws=50, seed=11)
    redis_server.stop()
    try:
        refused = requests.post(f"{base}/v1/jobs", json=body, timeout=60,
                                headers={"Idempotency-Key": key})
        assert refused.status_code == 503, refused.text
        assert refused.headers["Retry-After"]
    finally:
        redis_server.start()
    failed_jobs = requests.get(f"{base}/v1/jobs", timeout=30).json()["jobs"]
    assert [job["state"] for job in failed_jobs] == ["failed"]
    audit = requests.get(f"{base}/v1/jobs/{failed_jobs[0]['id']}/audit", timeout=30).json()
    for text in (refused.text, json.dumps(failed_jobs), json.dumps(audit)):
        assert "127.0.0.1" not in text and str(redis_server.port) not in text, text[:2000]

    retried = requests.post(f"{base}/v1/jobs", json=body, timeout=60,
                            headers={"Idempotency-Key": key})
    assert retried.status_code == 202, retried.text
    job_id = retried.json()["id"]
    assert job_id != failed_jobs[0]["id"]
    deadline = time.monotonic() + 120
    while requests.get(f"{base}/v1/jobs/{job_id}", timeout=30).json()["state"] != "succeeded":
        assert time.monotonic() < deadline, service.logs()
        time.sleep(0.5)
    # The key now belongs to the job that ran: a third send is answered with it.
    again = requests.post(f"{base}/v1/jobs", json=body, timeout=60,
                          headers={"Idempotency-Key": key})
    assert (again.status_code, again.json()["id"]) == (200, job_id)
