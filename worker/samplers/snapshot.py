"""Chain snapshots as bytes: an uncompressed .npz archive of float/int arrays plus one JSON header.

Two kinds share the layout: a snapshot (the chain's state, with the per-iteration records of
iterations ``records_from`` onward) and a records block (the draws and statistics of a stretch of
iterations, what an incremental checkpoint writes instead of every draw so far). Version 2 added
``records_from``; a version-1 snapshot holds every record and is read as one with
``records_from`` 0.

No pickle anywhere: the archive is written with numpy's own format and read back with
allow_pickle=False, and the header (settings, counters, generator state, adaptation scalars) is
UTF-8 JSON stored as a uint8 array. Python's float repr round-trips exactly, so JSON scalars
restore bit for bit.
"""

from __future__ import annotations

import io
import json
import zipfile
from typing import Any

import numpy as np

FORMAT = "drawyard-chain-snapshot"
RECORDS_FORMAT = "drawyard-chain-records"
VERSION = 2
READABLE_VERSIONS = (1, 2)
_HEADER_KEY = "header_json"


class SnapshotError(ValueError):
    """The bytes are not a chain snapshot this version can read."""


def encode(header: dict[str, Any], arrays: dict[str, np.ndarray], kind: str = FORMAT) -> bytes:
    if _HEADER_KEY in arrays:
        raise ValueError(f"array name {_HEADER_KEY!r} is reserved for the header")
    document = {"format": kind, "version": VERSION, **header}
    text = json.dumps(document, sort_keys=True).encode("utf-8")
    buffer = io.BytesIO()
    np.savez(buffer, **arrays, **{_HEADER_KEY: np.frombuffer(text, dtype=np.uint8)})
    return buffer.getvalue()


def decode(blob: bytes, kind: str = FORMAT) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    try:
        with np.load(io.BytesIO(blob), allow_pickle=False) as archive:
            arrays = {name: archive[name] for name in archive.files}
    except (ValueError, OSError, EOFError, zipfile.BadZipFile) as error:
        raise SnapshotError(f"not a readable chain snapshot: {error}") from error
    if _HEADER_KEY not in arrays:
        raise SnapshotError("not a chain snapshot: the header is missing")
    header = json.loads(arrays.pop(_HEADER_KEY).tobytes().decode("utf-8"))
    if header.get("format") != kind or header.get("version") not in READABLE_VERSIONS:
        raise SnapshotError(
            f"unsupported snapshot format {header.get('format')!r} "
            f"version {header.get('version')!r}"
        )
    return header, arrays
