"""Parquet and .npz downloads, long and wide, read back with pyarrow and numpy.

References outside the project: the Apache Parquet format as read by pyarrow.parquet; the NumPy
.npy/.npz format as read by numpy.load(allow_pickle=False); the JSON draws of the same job, whose
17-significant-digit numbers read back as exactly the stored doubles (IEEE 754-2008 section
5.12.2; common practice), so every value must agree bit for bit. ETag and If-None-Match follow
RFC 9110 sections 8.8.3 (strong tags), 13.1.2 (If-None-Match uses weak comparison) and 15.4.5
(304 Not Modified).
"""

from __future__ import annotations

import io
import json

import numpy as np
import pyarrow.parquet as pq
import pytest

QUERIES = ["", "quantities=mu_twice,mu&chains=3,1&thin=3"]


def json_draws(client, job_id: str, query: str) -> tuple[list[str], dict[int, np.ndarray]]:
    response = client.get(f"/v1/jobs/{job_id}/draws?{query}")
    assert response.status_code == 200
    document = json.loads(response.get_data())
    chains = {c["chain"]: np.asarray(c["draws"], dtype=np.float64) for c in document["chains"]}
    return document["quantities"], chains


def wide_from_json(names, chains, thin):
    chain = np.concatenate([np.full(len(v), c) for c, v in chains.items()])
    draw = np.concatenate([1 + thin * np.arange(len(v)) for v in chains.values()])
    return chain, draw, np.concatenate(list(chains.values()))


def same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    a, b = np.ascontiguousarray(a, np.float64), np.ascontiguousarray(b, np.float64)
    return a.shape == b.shape and bool(np.array_equal(a.view(np.uint64), b.view(np.uint64)))


def thin_of(query: str) -> int:
    return 3 if "thin=3" in query else 1


@pytest.mark.parametrize("query", QUERIES)
def test_parquet_wide_and_long_equal_the_json_draws_bit_for_bit(finished, query) -> None:
    app, job_id = finished
    client = app.test_client()
    names, chains = json_draws(client, job_id, query)
    chain, draw, values = wide_from_json(names, chains, thin_of(query))
    sep = "&" if query else ""

    wide = client.get(f"/v1/jobs/{job_id}/draws?{query}{sep}format=parquet&layout=wide")
    assert wide.status_code == 200 and wide.mimetype == "application/vnd.apache.parquet"
    file = pq.ParquetFile(io.BytesIO(wide.get_data()))
    assert file.num_row_groups == len(chains)  # one row group per chain
    table = file.read()
    assert table.column_names == ["chain", "draw", *names]
    assert np.array_equal(table["chain"].to_numpy(), chain)
    assert np.array_equal(table["draw"].to_numpy(), draw)
    for i, name in enumerate(names):
        assert same_bits(table[name].to_numpy(), values[:, i]), name

    long = client.get(f"/v1/jobs/{job_id}/draws?{query}{sep}format=parquet&layout=long")
    table = pq.read_table(io.BytesIO(long.get_data()))
    assert table.column_names == ["chain", "draw", "quantity", "value"]
    width = len(names)
    assert np.array_equal(table["chain"].to_numpy(), np.repeat(chain, width))
    assert np.array_equal(table["draw"].to_numpy(), np.repeat(draw, width))
    assert table["quantity"].to_pylist() == names * len(draw)
    assert same_bits(table["value"].to_numpy(), values.reshape(-1))


@pytest.mark.parametrize("query", QUERIES)
def test_npz_wide_and_long_equal_the_json_draws_bit_for_bit(finished, query) -> None:
    app, job_id = finished
    client = app.test_client()
    names, chains = json_draws(client, job_id, query)
    chain, draw, values = wide_from_json(names, chains, thin_of(query))
    sep = "&" if query else ""

    wide = client.get(f"/v1/jobs/{job_id}/draws?{query}{sep}format=npz")
    assert wide.status_code == 200 and wide.mimetype == "application/x-npz"
    with np.load(io.BytesIO(wide.get_data()), allow_pickle=False) as arrays:
        assert sorted(arrays.files) == ["chain", "draw", "quantities", "types", "values"]
        assert arrays["types"].tolist() == ["float64"] * len(names)
        assert arrays["quantities"].tolist() == names
        assert np.array_equal(arrays["chain"], chain) and np.array_equal(arrays["draw"], draw)
        assert same_bits(arrays["values"], values)

    long = client.get(f"/v1/jobs/{job_id}/draws?{query}{sep}format=npz&layout=long")
    with np.load(io.BytesIO(long.get_data()), allow_pickle=False) as arrays:
        width = len(names)
        assert np.array_equal(arrays["chain"], np.repeat(chain, width))
        assert np.array_equal(arrays["draw"], np.repeat(draw, width))
        assert arrays["quantity"].tolist() == names * len(draw)
        assert same_bits(arrays["value"], values.reshape(-1))


def test_sampler_statistics_as_parquet_equal_their_json(finished) -> None:
    app, job_id = finished
    client = app.test_client()
    document = json.loads(client.get(f"/v1/jobs/{job_id}/sampler-stats").get_data())
    expected = np.concatenate([np.asarray(c["draws"], np.float64) for c in document["chains"]])
    response = client.get(f"/v1/jobs/{job_id}/sampler-stats?format=parquet")
    table = pq.read_table(io.BytesIO(response.get_data()))
    assert table.column_names[2:] == document["statistics"]
    for i, name in enumerate(document["statistics"]):
        assert same_bits(table[name].to_numpy(), expected[:, i]), name


def test_accept_header_chooses_the_format(finished) -> None:
    """RFC 9110 section 12.5.1: the Accept header selects among the offered media types."""
    app, job_id = finished
    client = app.test_client()
    for media, check in (
        ("application/vnd.apache.parquet", lambda body: pq.read_table(io.BytesIO(body))),
        ("application/x-npz", lambda body: np.load(io.BytesIO(body), allow_pickle=False)),
    ):
        response = client.get(f"/v1/jobs/{job_id}/draws", headers={"Accept": media})
        assert response.status_code == 200 and response.mimetype == media
        assert "Accept" in response.headers["Vary"]
        check(response.get_data())


def test_the_download_is_streamed_chain_by_chain(finished) -> None:
    """Each chain's row group leaves as soon as it is written: more than one part per file."""
    app, job_id = finished
    response = app.test_client().get(f"/v1/jobs/{job_id}/draws?format=parquet", buffered=False)
    assert response.is_streamed
    parts = [part for part in response.response if part]
    assert len(parts) >= 3 + 1  # a part per chain, then the footer
    response.close()


def test_etag_is_strong_stable_and_if_none_match_gives_304(finished) -> None:
    app, job_id = finished
    client = app.test_client()
    path = f"/v1/jobs/{job_id}/draws?format=parquet&layout=long"
    # Each streamed body is read before the next request: the stream holds its request context.
    first = client.get(path)
    first_body = first.get_data()
    second = client.get(path)
    tag = first.headers["ETag"]
    assert tag == second.headers["ETag"] and first_body == second.get_data()
    assert tag.startswith('"') and tag.endswith('"')  # strong: no W/ prefix (RFC 9110 8.8.3)
    for header in (tag, f'"other", {tag}', "W/" + tag, "*"):
        again = client.get(path, headers={"If-None-Match": header})
        assert again.status_code == 304 and again.get_data() == b"", header
        assert again.headers["ETag"] == tag
    assert client.get(path, headers={"If-None-Match": '"other"'}).status_code == 200
    others = set()
    for query in (
        "format=parquet",
        "format=npz&layout=long",
        "format=json",
        "thin=2",
        "format=parquet&layout=long&chains=1",
    ):
        response = client.get(f"/v1/jobs/{job_id}/draws?{query}")
        response.get_data()
        others.add(response.headers["ETag"])
    assert tag not in others and len(others) == 5


def test_long_layout_needs_a_binary_format_and_unknown_layouts_are_refused(finished) -> None:
    app, job_id = finished
    client = app.test_client()
    for query in ("format=csv&layout=long", "layout=long", "format=npz&layout=tall"):
        response = client.get(f"/v1/jobs/{job_id}/draws?{query}")
        assert response.status_code == 400, query
        assert response.get_json()["errors"][0]["parameter"] == "layout"
