"""Downloads of a reused job: equal to the source's, and entity tags that mean what they say.

A strong entity tag promises the same bytes (RFC 9110 section 8.8.1): a client holding a file
with tag T may be told 304 only when the representation it asked for is byte for byte that file.
The JSON downloads name their job ("job": id), so a reused job's JSON differs from its source's
and must not share its tag; otherwise `drawyard fetch NEW draws -o f.json --if-changed` after a
fetch of the source answers "up to date" and leaves a file that names the other job. CSV,
Parquet and .npz carry no job id and are byte for byte the source's. Jobs run in process by the
service's own chain and finishing code on a real SQLite store.
"""

from __future__ import annotations

import pytest
from flask import Flask

from tests.service.bodies import normal_mean
from tests.service.test_registry_views import call, run_to_the_end

DOWNLOADS = [
    (resource, fmt, layout)
    for resource in ("draws", "sampler-stats")
    for fmt, layouts in (("json", ("wide",)), ("csv", ("wide",)), ("parquet", ("wide", "long")),
                         ("npz", ("wide", "long")))
    for layout in layouts
]  # fmt: skip


@pytest.fixture
def source_and_copy(app: Flask, queue) -> tuple[str, str]:
    client = app.test_client()
    body = normal_mean(chains=2, warmup=100, draws=100, seed=41)
    _, first = call(client, "POST", "/v1/jobs", body)
    run_to_the_end(app, first["id"], 2)
    _, again = call(client, "POST", "/v1/jobs", body)
    assert again["reused_from"] == first["id"]
    return first["id"], again["id"]


def _get(app: Flask, url: str, tag: str | None = None) -> tuple[int, bytes, str]:
    headers = {"If-None-Match": tag} if tag else {}
    response = app.test_client().get(url, headers=headers)
    return response.status_code, response.get_data(), response.headers["ETag"]


@pytest.mark.parametrize(("resource", "fmt", "layout"), DOWNLOADS)
def test_a_tag_is_shared_only_by_equal_bytes(
    app: Flask, source_and_copy: tuple[str, str], resource: str, fmt: str, layout: str
) -> None:
    source, copy = source_and_copy
    query = f"{resource}?format={fmt}&layout={layout}"
    _, source_bytes, source_tag = _get(app, f"/v1/jobs/{source}/{query}")
    _, copy_bytes, copy_tag = _get(app, f"/v1/jobs/{copy}/{query}")
    if fmt != "json":
        assert copy_bytes == source_bytes  # no worker ran the copy: the very same arrays
    if copy_bytes != source_bytes:
        assert copy_tag != source_tag
        # The source's tag does not make the copy's different bytes "not modified".
        status, body, _ = _get(app, f"/v1/jobs/{copy}/{query}", source_tag)
        assert status == 200 and body == copy_bytes
    # Its own tag still does (RFC 9110 section 13.1.2).
    status, body, _ = _get(app, f"/v1/jobs/{copy}/{query}", copy_tag)
    assert status == 304 and body == b""


def test_the_json_download_of_a_copy_names_the_copy(
    app: Flask, source_and_copy: tuple[str, str]
) -> None:
    import json

    source, copy = source_and_copy
    _, body, _ = _get(app, f"/v1/jobs/{copy}/draws")
    document = json.loads(body)
    assert document["job"] == copy
    _, original, _ = _get(app, f"/v1/jobs/{source}/draws")
    assert document["chains"] == json.loads(original)["chains"]
