"""The client's retries, backoff and timeouts against loopback servers of our own.

External references: RFC 9110 (Fielding, Nottingham & Reschke 2022, HTTP Semantics) section
10.2.3 "Retry-After" — delay-seconds or an HTTP-date, and its example date; RFC 6585 (Nottingham &
Fielding 2012) section 4 for 429 Too Many Requests; RFC 9562 (Davis, Peabody & Leach 2024) section
5.4 for the version field of a random (version 4) UUID; "full jitter" exponential backoff (Brooker
2015, "Exponential Backoff And Jitter", AWS Architecture Blog; from memory) checked as a uniform
distribution with scipy.stats.kstest.
"""

from __future__ import annotations

import time
import uuid
from datetime import UTC, datetime

import numpy as np
import pytest
from scipy import stats

from service.client import DrawyardClient, ProblemError, RetryPolicy, ServiceUnreachable
from service.client.retrying import parse_retry_after
from tests.client.loopback import Answer, closed_port_url, scripted_server, silent_server

JOB = {"id": "0123abcd", "state": "queued", "chains": [], "labels": {}, "verdict": None}
BODY = {"model": {}, "data": {}}
# time.sleep may return a hair early on some clocks; a millisecond is far below what is checked.
CLOCK_SLACK = 0.01


def client(url: str, **policy: float) -> DrawyardClient:
    retry = RetryPolicy(**{"retries": 5, "base_seconds": 0.01, "cap_seconds": 0.05, **policy})
    return DrawyardClient(
        url, connect_timeout=2, read_timeout=5, retry=retry, rng=np.random.default_rng(7)
    )


def gaps(received) -> np.ndarray:
    return np.diff([r.at for r in received])


def test_waits_as_retry_after_says_and_reuses_the_idempotency_key() -> None:
    """429, 429 (Retry-After: 1 second) then 503 (Retry-After as an HTTP-date two seconds on),
    then 202: the client repeats the same POST with the same key after at least each wait."""
    answers = [
        Answer(429, {"Retry-After": "1"}, {"title": "Too many requests", "status": 429}),
        Answer(429, {"Retry-After": "1"}, {"title": "Too many requests", "status": 429}),
        Answer(503, {}, {"title": "Unavailable", "status": 503}, retry_after_date_in=2),
        Answer(202, {"Location": "/v1/jobs/0123abcd"}, JOB),
    ]
    with scripted_server(answers) as server:
        sent_at = time.monotonic()
        job = client(server.url).submit(BODY)
        received = server.received
    assert job.id == "0123abcd" and job.state == "queued"
    assert [(r.method, r.path) for r in received] == [("POST", "/v1/jobs")] * 4
    keys = {r.headers["Idempotency-Key"] for r in received}
    assert len(keys) == 1
    assert uuid.UUID(keys.pop()).version == 4  # RFC 9562 section 5.4
    waited = gaps(received)
    assert waited[0] >= 1 - CLOCK_SLACK and waited[1] >= 1 - CLOCK_SLACK
    # An HTTP-date has whole-second resolution (RFC 9110 section 5.6.7): "two seconds on" from a
    # moment within a second is more than one second and at most two.
    assert waited[2] >= 1 - CLOCK_SLACK
    # Waiting as told, not longer: no backoff piled on top of the server's own wait.
    assert waited[0] < 1.5 and waited[1] < 1.5 and waited[2] < 2.5
    assert received[0].at - sent_at < 1.0


def test_every_submission_gets_its_own_key_and_an_explicit_key_is_sent_as_given() -> None:
    with scripted_server([Answer(202, {}, JOB)]) as server:
        api = client(server.url)
        api.submit(BODY)
        api.submit(BODY)
        api.submit(BODY, idempotency_key="nightly-2026-12-01")
        keys = [r.headers["Idempotency-Key"] for r in server.received]
    assert keys[0] != keys[1]
    assert keys[2] == "nightly-2026-12-01"


def test_gives_up_after_its_retries_with_the_problem_document() -> None:
    problem = {"type": "urn:example:busy", "title": "Busy", "status": 503, "detail": "queue full"}
    with scripted_server([Answer(503, {"Retry-After": "0"}, problem)]) as server:
        with pytest.raises(ProblemError) as caught:
            client(server.url, retries=2).job("0123abcd")
        count = len(server.received)
    assert count == 3  # the first try and two repeats
    assert caught.value.status == 503
    assert caught.value.problem == problem
    assert caught.value.detail == "queue full"


def test_a_retry_after_beyond_the_policy_is_reported_not_waited_for() -> None:
    with scripted_server([Answer(429, {"Retry-After": "3600"}, {"status": 429})]) as server:
        started = time.monotonic()
        with pytest.raises(ProblemError) as caught:
            client(server.url, max_retry_after_seconds=60).job("0123abcd")
        elapsed = time.monotonic() - started
        count = len(server.received)
    assert count == 1 and caught.value.status == 429
    assert caught.value.retry_after == 3600
    assert elapsed < 30


def test_errors_that_are_not_temporary_are_not_repeated() -> None:
    problem = {
        "title": "The submission is not valid",
        "status": 422,
        "errors": [{"pointer": "/sampler/draws", "message": "too many"}],
    }
    with scripted_server([Answer(422, {}, problem)]) as server:
        with pytest.raises(ProblemError) as caught:
            client(server.url).submit(BODY)
        count = len(server.received)
    assert count == 1
    assert caught.value.errors == [{"pointer": "/sampler/draws", "message": "too many"}]
    assert caught.value.is_client_error


def test_without_retry_after_the_waits_back_off_within_the_jitter_ceiling() -> None:
    """Three 503s with no Retry-After: the waits are drawn below base * 2**attempt."""
    answers = [Answer(503, {}, {"status": 503})] * 3 + [Answer(200, {}, JOB)]
    with scripted_server(answers) as server:
        client(server.url, base_seconds=0.2, cap_seconds=10).job("0123abcd")
        waited = gaps(server.received)
    assert len(waited) == 3
    # Upper bounds only, with a quarter second for thread scheduling on a loaded machine.
    assert np.all(waited < 0.2 * 2.0 ** np.arange(3) + 0.25)


def test_backoff_draws_are_uniform_up_to_the_exponential_ceiling() -> None:
    """Full jitter: the wait before repeat k is Uniform(0, min(cap, base * 2**k))."""
    policy = RetryPolicy(base_seconds=0.5, cap_seconds=3.0)
    rng = np.random.default_rng(20261201)
    for attempt, ceiling in [(0, 0.5), (2, 2.0), (6, 3.0)]:
        draws = np.array([policy.backoff(attempt, rng) for _ in range(2000)])
        assert draws.min() >= 0 and draws.max() <= ceiling
        # Fixed seed, so this is deterministic; 0.001 would flag a wrong shape or scale.
        assert stats.kstest(draws, stats.uniform(0, ceiling).cdf).pvalue > 0.001


def test_dropped_connections_are_retried_for_a_read() -> None:
    answers = [Answer(0, hang_up=True), Answer(0, hang_up=True), Answer(200, {}, JOB)]
    with scripted_server(answers) as server:
        job = client(server.url).job("0123abcd")
        count = len(server.received)
    assert job.id == "0123abcd" and count == 3


def test_nobody_listening_is_service_unreachable_after_the_retries() -> None:
    with pytest.raises(ServiceUnreachable):
        client(closed_port_url(), retries=2).job("0123abcd")


def test_a_server_that_never_answers_is_given_up_on_after_the_read_timeout() -> None:
    with silent_server() as url:
        api = DrawyardClient(url, connect_timeout=2, read_timeout=1.0, retry=RetryPolicy())
        started = time.monotonic()
        with pytest.raises(ServiceUnreachable, match="read timeout"):
            api.job("0123abcd")
        elapsed = time.monotonic() - started
    # One read timeout, not one per retry: a read that timed out is not repeated.
    assert 1.0 - CLOCK_SLACK <= elapsed < 1.9


def test_retry_after_values_of_rfc_9110() -> None:
    """RFC 9110 section 10.2.3 gives "Fri, 31 Dec 1999 23:59:59 GMT" and "120" as examples."""
    now = datetime(1999, 12, 31, 23, 58, 59, tzinfo=UTC)
    assert parse_retry_after("Fri, 31 Dec 1999 23:59:59 GMT", now) == 60
    assert parse_retry_after("120") == 120
    assert parse_retry_after("Fri, 31 Dec 1999 23:59:59 GMT", now.replace(year=2000)) == 0
    assert parse_retry_after("soon") is None
    assert parse_retry_after(None) is None


def test_an_api_key_is_sent_as_a_bearer_token() -> None:
    """RFC 6750 (Jones & Hardt 2012) section 2.1: "Authorization: Bearer <token>"."""
    with scripted_server([Answer(200, {}, JOB)]) as server:
        DrawyardClient(server.url, api_key="k-123", rng=np.random.default_rng(1)).job("0123abcd")
        sent = server.received[0].headers
    assert sent["Authorization"] == "Bearer k-123"


def test_a_download_that_breaks_off_is_reported(tmp_path) -> None:
    """RFC 9112 section 8: a message whose body ends before its Content-Length is incomplete."""
    with scripted_server([Answer(200, {}, {"job": "x"}, short_by=5000)]) as server:
        with pytest.raises(ServiceUnreachable, match="download stopped"):
            client(server.url).download("0123abcd", "draws", tmp_path / "d.json")
