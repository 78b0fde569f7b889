"""Sliding-window rate limits: per key, and failed authentications per client address.

Real store (SQLite and PostgreSQL) and real Redis; the views through Flask's test client, whose
client address is 127.0.0.1. RFC 6585 section 4 (429 with Retry-After). Issue 13 item 12: 150 bad
keys in a row were never refused, and fixed windows let a burst across a boundary reach twice the
limit. A sliding window counts every request of the last `window` seconds (common practice).
"""

from __future__ import annotations

import time

from service.access.keys import create_key
from tests.security.test_limits import PROBLEM, bearer, make_app


def test_bad_keys_from_one_address_are_throttled_and_then_even_a_good_key_waits(
    database_url, redis_url
):
    app = make_app(database_url, redis_url, auth_failure_limit=20, auth_failure_window=60)
    try:
        good = create_key(app.extensions["drawyard"].sessions, "alpha", ["read"])
        client = app.test_client()
        codes = [client.get("/v1/jobs", headers=bearer(f"dyk_{i:016x}.{'x' * 43}")).status_code
                 for i in range(150)]
        assert codes[:20] == [401] * 20
        assert set(codes[20:]) == {429}
        refused = client.get("/v1/jobs", headers=bearer(good.secret))
        assert refused.status_code == 429 and refused.mimetype == PROBLEM
        assert 1 <= int(refused.headers["Retry-After"]) <= 60
        # Another address has its own allowance.
        other = client.get("/v1/jobs", headers=bearer(good.secret),
                           environ_base={"REMOTE_ADDR": "127.0.0.2"})
        assert other.status_code == 200
    finally:
        app.extensions["drawyard"].close()


def test_a_burst_across_a_window_boundary_gets_no_second_allowance(database_url, redis_url):
    window, limit = 4, 5
    app = make_app(database_url, redis_url, rate_limit=limit, rate_window=window)
    try:
        key = create_key(app.extensions["drawyard"].sessions, "alpha", ["read"])
        client = app.test_client()
        # Just before a multiple of the window (where a fixed window would start afresh)...
        time.sleep((window - 0.8 - time.time() % window) % window)
        first = [client.get("/v1/jobs", headers=bearer(key.secret)).status_code
                 for _ in range(limit)]
        # ...and just after it, well within `window` seconds of the first burst.
        time.sleep((window - time.time() % window) + 0.2)
        second = [client.get("/v1/jobs", headers=bearer(key.secret)).status_code
                  for _ in range(limit)]
        assert first == [200] * limit
        assert second == [429] * limit, second
        # Once the first burst has left the window, requests are let through again.
        time.sleep(window)
        assert client.get("/v1/jobs", headers=bearer(key.secret)).status_code == 200
    finally:
        app.extensions["drawyard"].close()
