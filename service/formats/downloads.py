"""Building a results download: the ETag check first, then a streamed body in the chosen format."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from flask import Request, Response, stream_with_context
from sqlalchemy import select

from service.draw_export import Selection, stream_csv, stream_json
from service.formats.etags import download_tag, none_match
from service.formats.negotiation import FILE_SUFFIX, MEDIA_TYPES
from service.formats.npz import stream_npz
from service.formats.parquet import stream_parquet
from service.http_caching import IMMUTABLE, REVALIDATE
from service.runtime import Runtime
from service.store.models import Chain, ChainArray

# Per resource: the stored array kind, the JSON member naming the columns, the long-layout label.
RESOURCES = {
    "draws": ("draws", "quantities", "quantity"),
    "sampler-stats": ("stat", "statistics", "statistic"),
}

# The formats whose bytes hold the job id (stream_json writes "job"); the others hold only the
# arrays, so a reused job's download is byte for byte, and tag for tag, its source's.
NAMES_THE_JOB = frozenset({"json"})


def _stored(runtime: Runtime, chains: list[Chain], kind: str) -> tuple[list[str], dict[int, int]]:
    """SHA-256s of the arrays behind a download (in a fixed order) and each chain's row count."""
    by_id = {chain.id: chain.chain_index for chain in chains}
    with runtime.sessions() as session:
        rows = session.execute(
            select(ChainArray.chain_id, ChainArray.name, ChainArray.sha256, ChainArray.shape)
            .where(ChainArray.chain_id.in_(list(by_id)), ChainArray.kind == kind)
            .order_by(ChainArray.chain_id, ChainArray.name)
        ).all()
    ordered = sorted(rows, key=lambda row: (by_id[row.chain_id], row.name))
    hashes = [row.sha256 for row in ordered]
    lengths = {by_id[row.chain_id]: int(row.shape[0]) for row in ordered}
    return hashes, lengths


def download(
    runtime: Runtime,
    request: Request,
    resource: str,
    job_id: str,
    chains: list[Chain],
    selection: Selection,
    load: Callable[[int], np.ndarray],
    format_name: str,
    layout: str,
    partial: bool = False,
    final: bool = False,
) -> Response:
    """A 304 when the client's copy is current, else the streamed file with its strong ETag.

    ``partial`` marks the draws of a job stopped at its wall-time limit, in the formats that carry
    metadata (JSON, Parquet); CSV and .npz have none, so for them the job record says it.
    """
    kind, column_key, value_label = RESOURCES[resource]
    chosen = [c for c in chains if c.chain_index in set(selection.chains)]
    hashes, lengths = _stored(runtime, chosen, kind)
    named = job_id if format_name in NAMES_THE_JOB else None
    tag = download_tag(resource, format_name, layout, selection, hashes, named)
    caching = IMMUTABLE if final else REVALIDATE
    if none_match(request.headers.get("If-None-Match"), tag):
        response = Response(status=304)
        response.headers["ETag"] = tag
        response.headers["Cache-Control"] = caching
        return response
    if format_name == "json":
        body = stream_json(job_id, column_key, selection, load, partial)
    elif format_name == "csv":
        body = stream_csv(selection, load, selection.names)
    elif format_name == "parquet":
        body = stream_parquet(selection, load, layout, value_label, partial)
    else:
        body = stream_npz(selection, load, lengths, layout, value_label, column_key)
    response = Response(stream_with_context(body), mimetype=MEDIA_TYPES[format_name])
    response.headers["ETag"] = tag
    response.headers["Cache-Control"] = caching
    # The same URL answers in several formats chosen by Accept: caches must key on it.
    response.headers["Vary"] = "Accept"
    if format_name != "json":
        filename = f"{job_id}-{resource}{'-long' if layout == 'long' else ''}"
        response.headers["Content-Disposition"] = (
            f'attachment; filename="{filename}.{FILE_SUFFIX[format_name]}"'
        )
    return response
