"""Canonical JSON and its SHA-256: the fingerprints the audit record and idempotency rely on."""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any

from worker.problems import escape_token

NOT_JSON_NUMBER = "NaN and infinity are not JSON numbers; give a finite number or leave it out."


def canonical_json(value: Any) -> bytes:
    """Sorted keys, no insignificant whitespace, UTF-8; equal documents give equal bytes."""
    return json.dumps(
        value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


def sha256_of_json(value: Any) -> str:
    return hashlib.sha256(canonical_json(value)).hexdigest()


def non_finite_pointers(value: Any, pointer: str = "") -> list[str]:
    """JSON pointers (RFC 6901) to the NaN and infinite numbers in ``value``, which the parser
    accepts as bare tokens but canonical JSON cannot write."""
    if isinstance(value, float):
        return [] if math.isfinite(value) else [pointer]
    if isinstance(value, dict):
        items = ((f"{pointer}/{escape_token(str(key))}", member) for key, member in value.items())
    elif isinstance(value, list):
        items = ((f"{pointer}/{index}", member) for index, member in enumerate(value))
    else:
        return []
    return [found for where, member in items for found in non_finite_pointers(member, where)]
