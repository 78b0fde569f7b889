"""Arrays in and out of the store: zlib-compressed little-endian .npy bytes with a SHA-256."""

from __future__ import annotations

import hashlib
import io
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np

ENCODING = "npy+zlib"
# Bytes handed to zlib, or taken from it, per call: the encoders and decoders below work through an
# array in pieces of about this size rather than holding a second copy of it (our choice: large
# enough that the per-call cost vanishes, small beside any array worth streaming).
PIECE_BYTES = 4 << 20


@dataclass(frozen=True)
class EncodedArray:
    # a bytearray when encoded here (grown in place; the drivers take any buffer), bytes when read
    data: bytes | bytearray
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
    """The array as .npy bytes compressed with zlib, made from the array's own memory piece by
    piece: besides the array, only its compressed form is held (no .npy copy of it)."""
    values = np.asarray(values)
    little = np.ascontiguousarray(values, dtype=values.dtype.newbyteorder("<"))
    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(header, np.lib.format.header_data_from_array_1_0(little))
    compressor = zlib.compressobj(level=6)
    data = bytearray(compressor.compress(header.getvalue()))
    if little.size:
        memory = memoryview(little).cast("B")
        for start in range(0, len(memory), PIECE_BYTES):
            data += compressor.compress(memory[start : start + PIECE_BYTES])
    data += compressor.flush()
    return EncodedArray(
        data=data,
        dtype=little.dtype.str,
        shape=list(little.shape),
        sha256=_sha256(little),
    )


def _pieces(source: Any) -> Iterator[bytes | memoryview]:
    """The bytes of ``source`` (bytes-like, or anything with ``read(size)``) a piece at a time."""
    if hasattr(source, "read"):
        while piece := source.read(PIECE_BYTES):
            yield piece
        return
    view = memoryview(source)
    for start in range(0, len(view), PIECE_BYTES):
        yield view[start : start + PIECE_BYTES]


class _Inflating:
    """A file-like ``read`` over zlib-compressed bytes, inflating only as much as is asked for."""

    def __init__(self, source: Any):
        self._inflater = zlib.decompressobj()
        self._source = _pieces(source)
        self._ready = bytearray()

    def read(self, size: int) -> bytes:
        while len(self._ready) < size and not self._inflater.eof:
            chunk = self._inflater.unconsumed_tail
            if not chunk:
                chunk = next(self._source, b"")
                if not chunk:
                    break
            # max_length bounds the output; what it leaves waits in unconsumed_tail
            self._ready += self._inflater.decompress(chunk, size - len(self._ready))
        out = bytes(self._ready[:size])
        del self._ready[:size]
        return out


def row_blocks(
    data: Any, rows: int, expected_sha256: str | None = None
) -> Iterator[np.ndarray]:
    """A stored 2-D C-order array ``rows`` rows at a time, inflated as it goes: a long chain's
    draws read without ever being whole in memory. ``data`` is the stored bytes, or a reader of
    them (``read(size)``: service/store/large_values.py). With ``expected_sha256`` the bytes are
    hashed on the way and ValueError raised after the last block if they differ."""
    stream = _Inflating(data)
    version = np.lib.format.read_magic(stream)
    if version == (1, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_1_0(stream)
    elif version == (2, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_2_0(stream)
    else:
        raise ValueError(f"unsupported .npy version {version}")
    if len(shape) != 2 or fortran or dtype.hasobject or dtype.newbyteorder("<") != dtype:
        raise ValueError(f"not a stored little-endian C-order table: {shape}, {dtype}")
    digest = hashlib.sha256()
    width = shape[1] * dtype.itemsize
    for start in range(0, shape[0], max(1, rows)):
        count = min(rows, shape[0] - start)
        raw = stream.read(count * width)
        if len(raw) != count * width:
            raise ValueError("the stored array ends early")
        digest.update(raw)  # little-endian C order: the canonical bytes themselves
        yield np.frombuffer(raw, dtype=dtype).reshape(count, shape[1])
    if expected_sha256 is not None:
        found = digest.hexdigest()
        if found != expected_sha256:
            raise ValueError(f"stored array is corrupt: SHA-256 {found}, not {expected_sha256}")


def decode_array(data: bytes, expected_sha256: str | None = None) -> np.ndarray:
    """The stored array; checks its SHA-256 when one is given."""
    values = np.load(io.BytesIO(zlib.decompress(data)), allow_pickle=False)
    if expected_sha256 is not None:
        found = _sha256(np.ascontiguousarray(values, dtype=values.dtype.newbyteorder("<")))
        if found != expected_sha256:
            raise ValueError(f"stored array is corrupt: SHA-256 {found}, not {expected_sha256}")
    return values
