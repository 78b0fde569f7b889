"""Completion callbacks end to end: gunicorn, real Celery workers, real Redis, SQLite and
PostgreSQL stores, and a receiver on loopback that verifies the signature as the Standard Webhooks
specification describes it (HMAC-SHA256, RFC 2104, over id.timestamp.body, base64, "v1,"), with
hmac.compare_digest.

The allow-list is checked at submission (a 422 problem with an RFC 6901 pointer, nothing stored),
and delivery is retried with exponential backoff (doubling delays; common practice) a bounded
number of times, every attempt in the job's event log.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import time
from datetime import datetime

import pytest
import requests

from service.app import create_app
from service.callbacks import UnusableUrl, url_allowed
from tests.callbacks.receiver import Receiver
from tests.service.bodies import normal_mean

SECRET = "test-secret-for-callbacks"
TERMINAL = ("succeeded", "failed", "cancelled")


@pytest.fixture
def receiver():
    server = Receiver(SECRET).start()
    yield server
    server.stop()


def with_notify(body: dict, url: str) -> dict:
    return {**body, "notify": {"url": url}}


def wait(predicate, timeout: float, what: str):
    deadline = time.monotonic() + timeout
    while True:
        value = predicate()
        if value:
            return value
        assert time.monotonic() < deadline, f"gave up waiting for {what}"
        time.sleep(0.2)


def callback_events(base: str, job_id: str) -> list[dict]:
    audit = requests.get(f"{base}/v1/jobs/{job_id}/audit", timeout=30).json()
    return [e for e in audit["events"] if e["kind"].startswith("callback")]


def test_prefix_boundaries_of_the_allow_list() -> None:
    """A prefix admits URLs under it only: a longer host name or port is another origin
    (RFC 3986 section 3.2: the authority ends at "/", "?", "#" or the end)."""
    prefixes = ["https://hooks.example.org", "http://127.0.0.1:8080/drawyard/"]
    assert url_allowed("https://hooks.example.org/a?b", prefixes)
    assert url_allowed("https://hooks.example.org", prefixes)
    assert url_allowed("http://127.0.0.1:8080/drawyard/done", prefixes)
    assert not url_allowed("https://hooks.example.org.evil.net/x", prefixes)
    assert not url_allowed("https://hooks.example.org:444/x", prefixes)
    assert not url_allowed("http://127.0.0.1:8080/other", prefixes)
    with pytest.raises(UnusableUrl):
        url_allowed("ftp://hooks.example.org/x", ["ftp://hooks.example.org"])


def test_urls_are_compared_in_normal_form_and_path_tricks_are_refused() -> None:
    """RFC 3986 section 6.2.2: case, percent-encoding and default-port normalisation before the
    comparison; dot segments (section 5.2.4 would resolve them to another path), encoded dots
    and user information are refused outright rather than resolved."""
    prefixes = ["http://127.0.0.1:8080/hooks/", "https://hooks.example.org/drawyard"]
    assert url_allowed("HTTPS://Hooks.Example.ORG:443/drawyard/x", prefixes)
    assert url_allowed("http://127.0.0.1:8080/hooks/%64one", prefixes)
    assert url_allowed("https://hooks.example.org/drawyard", prefixes)
    assert not url_allowed("https://hooks.example.org/drawyardx", prefixes)
    assert not url_allowed("http://127.0.0.1:8080/%68ooksx/", prefixes)
    for refused in [
        "http://127.0.0.1:8080/hooks/../../admin",
        "http://127.0.0.1:8080/hooks/./x",
        "http://127.0.0.1:8080/hooks/%2e%2e/admin",
        "http://127.0.0.1:8080/hooks/%2E%2e/admin",
        "https://hooks.example.org@evil.invalid/drawyard/x",
        "http://127.0.0.1:8080/hooks/a\\..\\b",
        "http://[",
        "http://127.0.0.1:99999/hooks/",
    ]:
        with pytest.raises(UnusableUrl):
            url_allowed(refused, prefixes)


def test_a_url_outside_the_allow_list_is_refused_at_submission(tmp_path, redis_url) -> None:
    """RFC 9457 problem with a pointer; nothing is stored or queued."""
    from service.store import migrate

    url = f"sqlite:///{(tmp_path / 'cb.sqlite').resolve()}"
    migrate(url)
    app = create_app(
        {
            "database_url": url,
            "broker_url": redis_url,
            "callback_allow": "http://127.0.0.1:9/hooks/",
            "callback_secret": SECRET,
        }
    )
    client = app.test_client()
    refused = client.post("/v1/jobs", json=with_notify(normal_mean(), "http://10.0.0.1/hooks/x"))
    assert refused.status_code == 422
    assert [e["pointer"] for e in refused.get_json()["errors"]] == ["/notify/url"]
    malformed = client.post("/v1/jobs", json={**normal_mean(), "notify": {"url": 5}})
    assert malformed.status_code == 422
    assert malformed.get_json()["errors"][0]["pointer"].startswith("/notify")
    assert client.get("/v1/jobs").get_json()["jobs"] == []
    accepted = client.post(
        "/v1/jobs", json=with_notify(normal_mean(), "http://127.0.0.1:9/hooks/x")
    )
    assert accepted.status_code == 202
    app.extensions["drawyard"].close()


@pytest.mark.slow
def test_signed_callbacks_retry_with_backoff_until_the_receiver_accepts(
    database_url, redis_url, live_service, receiver
) -> None:
    """A receiver failing twice (HTTP 500) then accepting: three attempts, one success; one that
    always fails: exactly the configured number of attempts, then the log says it gave up."""
    receiver.plan = {"/flaky": [500, 500], "/down": [500] * 10}
    service = live_service(
        database_url,
        redis_url,
        workers=1,
        env={
            "DRAWYARD_CALLBACK_ALLOW": receiver.base_url + "/",
            "DRAWYARD_CALLBACK_SECRET": SECRET,
            "DRAWYARD_CALLBACK_BACKOFF": "0.5",
            "DRAWYARD_CALLBACK_ATTEMPTS": "3",
        },
    )
    base = service.base_url
    jobs = {}
    for path in ("/flaky", "/down"):
        body = with_notify(normal_mean(chains=2, warmup=100, draws=100), receiver.base_url + path)
        response = requests.post(base + "/v1/jobs", json=body, timeout=30)
        assert response.status_code == 202, response.text
        jobs[path] = response.json()["id"]

    wait(lambda: len(receiver.for_path("/flaky")) >= 3, 120, "three deliveries\n" + service.logs())
    wait(lambda: len(receiver.for_path("/down")) >= 3, 120, "three failed deliveries")
    time.sleep(3.0)  # any fourth attempt (there must be none) would come within 2 s at this backoff

    flaky = receiver.for_path("/flaky")
    assert [r.answered for r in flaky] == [500, 500, 200]
    assert all(r.signature_valid for r in flaky)
    assert [r.attempt for r in flaky] == ["1", "2", "3"]
    # one message id for the job's callback on every attempt, so a receiver can drop repeats
    assert {r.message_id for r in flaky} == {f"msg_{jobs['/flaky']}"}
    status = requests.get(f"{base}/v1/jobs/{jobs['/flaky']}", timeout=30).json()
    for document in receiver.documents("/flaky"):
        assert document["id"] == jobs["/flaky"] and document["state"] == status["state"]
        assert document["state"] in TERMINAL
    events = callback_events(base, jobs["/flaky"])
    # Backoff: a retry never comes before its delay (0.5 s, then doubled to 1 s). Each event is
    # written after its POST and the retry is scheduled after that, so each gap is at least it.
    stamps = [datetime.fromisoformat(e["at"]) for e in events]
    gaps = [(b - a).total_seconds() for a, b in zip(stamps, stamps[1:], strict=False)]
    assert gaps[0] >= 0.5 and gaps[1] >= 1.0, gaps
    assert [e["kind"] for e in events] == ["callback_attempt"] * 3
    assert [e["detail"]["status_code"] for e in events] == [500, 500, 200]
    assert [e["detail"]["delivered"] for e in events] == [False, False, True]
    assert [e["detail"]["attempt"] for e in events] == [1, 2, 3]
    assert [e["detail"].get("next_attempt_in_seconds") for e in events] == [0.5, 1.0, None]

    down = receiver.for_path("/down")
    assert [r.answered for r in down] == [500, 500, 500]
    events = callback_events(base, jobs["/down"])
    assert [e["kind"] for e in events] == ["callback_attempt"] * 3 + ["callback_abandoned"]
    assert events[-1]["detail"] == {"attempts": 3}


def test_the_signature_is_the_standard_webhooks_construction() -> None:
    """Standard Webhooks (standardwebhooks.com, "Verifying webhook authenticity"; from memory):
    signed content id + "." + timestamp + "." + body; HMAC-SHA256 keyed with the base64-decoded
    part of a "whsec_" secret; header value "v1," + base64 of the digest. Computed here with hmac,
    hashlib and base64 only, for a whsec_ secret and for a plain one (its UTF-8 bytes)."""
    from service.callbacks import sign

    key = bytes(range(32))
    body, message, stamp = b'{"id":"x","state":"succeeded"}', "msg_x", "1700000000"
    content = b"msg_x.1700000000." + body
    for secret, expected_key in (("whsec_" + base64.b64encode(key).decode(), key),
                                 (SECRET, SECRET.encode())):
        digest = hmac.new(expected_key, content, hashlib.sha256).digest()
        assert sign(secret, message, stamp, body) == "v1," + base64.b64encode(digest).decode()


def test_a_tampered_body_id_or_timestamp_fails_the_receivers_check(receiver) -> None:
    """The receiver's check must be able to fail: change one byte of the body, the id or the
    timestamp. A header with several signatures passes when any one matches (the specification
    lets a sender list one per secret while a secret is being rotated)."""
    from service.callbacks import sign

    body, message, stamp = b'{"id":"x","state":"succeeded"}', "msg_x", "1700000000"
    good = sign(SECRET, message, stamp, body)
    for sent_body, sent_id, sent_stamp, signature, expected in (
        (body, message, stamp, good, 200),
        (body, message, stamp, "v1,AAAA " + good, 200),
        (body.replace(b"succeeded", b"failed"), message, stamp, good, 401),
        (body, "msg_y", stamp, good, 401),
        (body, message, "1700000001", good, 401),
    ):
        requests.post(
            receiver.base_url + "/check",
            data=sent_body,
            headers={"webhook-id": sent_id, "webhook-timestamp": sent_stamp,
                     "webhook-signature": signature},
            timeout=10,
        )  # fmt: skip
        assert receiver.for_path("/check")[-1].answered == expected
