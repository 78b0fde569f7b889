"""HTTP conventions on the real service: strong validators and conditional requests (RFC 9110
sections 8.8.3 and 13.1.2), freshness of what can no longer change (RFC 9111 section 5.2.2.1;
RFC 8246, the immutable directive), the Link header of paginated lists (RFC 8288 section 3), and
the submitted request served back so that the audit record's digests can be checked from it."""

from __future__ import annotations

import hashlib
import re

import pytest
import requests

from service.canonical import jcs_json
from service.client import DrawyardClient, wait_for_job
from tests.harness.live_service import LiveService
from tests.service.bodies import normal_mean, variant

LINK = re.compile(r'^<(?P<target>[^>]+)>; rel="next"$')


@pytest.fixture(scope="module")
def finished_job(shared_service: LiveService) -> str:
    api = DrawyardClient(shared_service.base_url)
    body = variant(normal_mean(), labels={"suite": "http-conventions"})
    del body["sampler"]["seed"]  # the service draws one: the stored body then differs from it
    job = api.submit(body)
    wait_for_job(api, job.id, interval=0.2, timeout=300, progress=False)
    return job.id


FINAL = ["", "/summary", "/diagnostics", "/draws", "/draws?format=csv", "/sampler-stats"]


@pytest.mark.parametrize("path", [*FINAL, "/audit", "/request", "/request?part=spec"])
def test_every_finished_resource_has_a_strong_tag_that_answers_304(
    shared_service: LiveService, finished_job: str, path: str
) -> None:
    url = f"{shared_service.base_url}/v1/jobs/{finished_job}{path}"
    first = requests.get(url, timeout=30)
    assert first.status_code == 200
    tag = first.headers["ETag"]
    assert re.fullmatch(r'"[0-9a-f]{64}"', tag)  # strong: no W/ prefix
    again = requests.get(url, headers={"If-None-Match": tag}, timeout=30)
    assert again.status_code == 304 and again.content == b""
    assert again.headers["ETag"] == tag
    other = requests.get(url, headers={"If-None-Match": '"' + "0" * 64 + '"'}, timeout=30)
    assert other.status_code == 200 and other.content == first.content
    caching = first.headers["Cache-Control"]
    if path in FINAL or path.startswith("/request"):
        assert "immutable" in caching and re.search(r"max-age=\d+", caching)
    else:
        # Completion callbacks log their delivery attempts after the job ended.
        assert "immutable" not in caching and "no-cache" in caching


def test_a_running_job_is_not_marked_immutable(shared_service: LiveService) -> None:
    api = DrawyardClient(shared_service.base_url)
    job = api.submit(variant(normal_mean(warmup=2000, draws=3000, seed=8),
                             labels={"suite": "http-running"}))  # fmt: skip
    shown = requests.get(f"{shared_service.base_url}/v1/jobs/{job.id}", timeout=30)
    assert shown.json()["state"] in ("queued", "running")
    assert "immutable" not in shown.headers["Cache-Control"]
    api.cancel(job.id)


def test_pages_carry_a_link_to_the_next_page_beside_the_cursor(
    shared_service: LiveService, finished_job: str
) -> None:
    api = DrawyardClient(shared_service.base_url)
    second = api.submit(variant(normal_mean(seed=9), labels={"suite": "http-conventions"}))
    base = shared_service.base_url
    query = {"label": "suite:http-conventions", "limit": "1"}
    first = requests.get(f"{base}/v1/jobs", params=query, timeout=30)
    cursor = first.json()["next_cursor"]
    assert cursor
    target = LINK.match(first.headers["Link"])["target"]
    followed = requests.get(base + target, timeout=30)
    by_cursor = requests.get(f"{base}/v1/jobs", params={**query, "cursor": cursor}, timeout=30)
    assert [j["id"] for j in followed.json()["jobs"]] == [j["id"] for j in by_cursor.json()["jobs"]]
    assert {first.json()["jobs"][0]["id"], followed.json()["jobs"][0]["id"]} == {
        finished_job, second.id,
    }  # fmt: skip
    assert "Link" not in followed.headers  # the last page
    api.cancel(second.id)


def test_the_served_request_reproduces_the_audit_digests(
    shared_service: LiveService, finished_job: str
) -> None:
    """Each part's bytes hash to the audit's digest, and they are the RFC 8785 canonical JSON of
    the part in the whole document (so any conforming writer gives the same digest)."""
    base = f"{shared_service.base_url}/v1/jobs/{finished_job}"
    audit = requests.get(f"{base}/audit", timeout=30).json()
    document = requests.get(f"{base}/request", timeout=30).json()
    assert audit["hashes"]["scheme"] == document["digest_scheme"] == "rfc8785"
    for part, digest in (("request", "request"), ("spec", "model"), ("data", "data")):
        served = requests.get(f"{base}/request", params={"part": part}, timeout=30)
        assert served.status_code == 200
        assert hashlib.sha256(served.content).hexdigest() == audit["hashes"][digest], part
        assert served.content == jcs_json(document[part])
    # The body as sent had no seed; the stored submission holds the one the service drew.
    assert "seed" not in document["request"]["sampler"]
    assert document["submission"]["sampler"]["seed"] == audit["seed"]
    assert document["spec"] == document["request"]["model"]
    refused = requests.get(f"{base}/request", params={"part": "everything"}, timeout=30)
    assert refused.status_code == 400 and refused.json()["errors"][0]["parameter"] == "part"
