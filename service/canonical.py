"""Canonical JSON and its SHA-256: the fingerprints the audit record and idempotency rely on."""

from __future__ import annotations

import hashlib
import json
from typing import Any


def canonical_json(value: Any) -> bytes:
    """Sorted keys, no insignificant whitespace, UTF-8; equal documents give equal bytes."""
    return json.dumps(
        value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


def sha256_of_json(value: Any) -> str:
    return hashlib.sha256(canonical_json(value)).hexdigest()
