"""Strong entity tags for downloads and the If-None-Match check (RFC 9110 sections 8.8.3, 13.1.2).

A download is fixed by the stored arrays (their SHA-256s never change once a chain succeeded) and
by what the query asked for, so the tag is a hash of both: the same bytes get the same tag on every
API process, and any change to either gives a new one.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence

from service.draw_export import Selection

# Bumped when the bytes written for the same arrays and query would change.
# 2: JSON and Parquet say whether the draws are partial; 3: the job id is part of a JSON tag;
# 4: columns in their natural types (int64 chain, whole numbers, true/false)
ENCODING_VERSION = "4"


def download_tag(
    resource: str,
    format_name: str,
    layout: str,
    selection: Selection,
    array_hashes: Sequence[str],
    job_id: str | None = None,
) -> str:
    """The quoted strong ETag value for one download.

    ``job_id`` is given for the formats whose bytes name the job: a reused job shares its source's
    arrays, but not its JSON, so it must not share that tag either.
    """
    identity = {
        "version": ENCODING_VERSION,
        "job": job_id,
        "resource": resource,
        "format": format_name,
        "layout": layout,
        "chains": selection.chains,
        "columns": selection.names,
        "thin": selection.thin,
        "arrays": list(array_hashes),
    }
    digest = hashlib.sha256(json.dumps(identity, separators=(",", ":")).encode()).hexdigest()
    return f'"{digest}"'


def _opaque(tag: str) -> str:
    # Weak comparison ignores the W/ prefix (RFC 9110 section 8.8.3.2).
    tag = tag.strip()
    return tag[2:] if tag.startswith("W/") else tag


def none_match(header: str | None, tag: str) -> bool:
    """True when If-None-Match names this tag (or is "*"): the client's copy is current."""
    if not header:
        return False
    if header.strip() == "*":
        return True
    # A tag holding a comma can never be one of ours (they are hex), so splitting on commas
    # loses no match.
    return any(_opaque(candidate) == _opaque(tag) for candidate in header.split(","))
