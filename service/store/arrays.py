"""Arrays in and out of the store: zlib-compressed little-endian .npy bytes with a SHA-256."""

from __future__ import annotations

import hashlib
import io
import zlib
from dataclasses import dataclass

import numpy as np

ENCODING = "npy+zlib"


@dataclass(frozen=True)
class EncodedArray:
    data: bytes
    dtype: str
    shape: list[int]
    sha256: str


def canonical_bytes(values: np.ndarray) -> bytes:
    """C-order little-endian bytes of the array's values; what the stored SHA-256 covers."""
    return np.ascontiguousarray(values, dtype=values.dtype.newbyteorder("<")).tobytes()


def _sha256(little: np.ndarray) -> str:
    """SHA-256 of a C-contiguous array's bytes, read through a view of its memory: a long chain
    is not copied to be hashed."""
    if little.size == 0:
        return hashlib.sha256(b"").hexdigest()
    return hashlib.sha256(memoryview(little).cast("B")).hexdigest()


def encode_array(values: np.ndarray) -> EncodedArray:
    values = np.asarray(values)
    little = np.ascontiguousarray(values, dtype=values.dtype.newbyteorder("<"))
    buffer = io.BytesIO()
    np.save(buffer, little, allow_pickle=False)
    # compressed straight from the buffer's memory (getvalue() would copy a long chain once more)
    with buffer.getbuffer() as view:
        data = zlib.compress(view, level=6)
    return EncodedArray(
        data=data,
        dtype=little.dtype.str,
        shape=list(little.shape),
        sha256=_sha256(little),
    )


def decode_array(data: bytes, expected_sha256: str | None = None) -> np.ndarray:
    """The stored array; checks its SHA-256 when one is given."""
    values = np.load(io.BytesIO(zlib.decompress(data)), allow_pickle=False)
    if expected_sha256 is not None:
        found = _sha256(np.ascontiguousarray(values, dtype=values.dtype.newbyteorder("<")))
        if found != expected_sha256:
            raise ValueError(f"stored array is corrupt: SHA-256 {found}, not {expected_sha256}")
    return values
