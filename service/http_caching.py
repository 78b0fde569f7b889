"""HTTP validators and freshness for JSON resources (RFC 9110 sections 8.8.3, 13.1.2; RFC 9111
section 5.2; RFC 8246) and the Link header of paginated lists (RFC 8288).

A JSON resource's strong ETag is the SHA-256 of the bytes sent, so equal bytes share a tag on
every API process and any change gives a new one. What can no longer change (a finished job's
summary, diagnostics and status, its downloads) is marked immutable for a year, the longest
freshness RFC 9111 section 5.2.2.1 advises senders to give; everything else is to be revalidated.
"""

from __future__ import annotations

import hashlib
from typing import Any
from urllib.parse import urlencode

from flask import Request, Response, current_app, request

from service.formats.etags import none_match

# The job belongs to whoever may read it, so shared caches keep none of it.
IMMUTABLE = "private, max-age=31536000, immutable"
REVALIDATE = "private, no-cache"


def body_tag(body: bytes) -> str:
    return f'"{hashlib.sha256(body).hexdigest()}"'


def cached_json(document: Any, final: bool, status: int = 200) -> Response:
    """``document`` as JSON with its ETag and Cache-Control, or a 304 when If-None-Match holds
    the tag (RFC 9110 section 15.4.5: the 304 carries the same ETag and Cache-Control)."""
    # The app's own JSON writer, so these bodies read like every other answer.
    body = (current_app.json.dumps(document) + "\n").encode("utf-8")
    headers = {"ETag": body_tag(body), "Cache-Control": IMMUTABLE if final else REVALIDATE}
    if none_match(request.headers.get("If-None-Match"), headers["ETag"]):
        return Response(status=304, headers=headers)
    return Response(body, status=status, mimetype="application/json", headers=headers)


def next_link(req: Request, cursor: str | None) -> dict[str, str]:
    """``Link: <...>; rel="next"`` for the page after this one, keeping the query's filters."""
    if not cursor:
        return {}
    query = [(k, v) for k, v in req.args.items(multi=True) if k != "cursor"]
    query.append(("cursor", cursor))
    return {"Link": f'<{req.path}?{urlencode(query)}>; rel="next"'}


def canonical_part(body: bytes) -> Response:
    """Bytes that are the canonical JSON of a stored, unchanging part of a submission."""
    headers = {"ETag": body_tag(body), "Cache-Control": IMMUTABLE}
    if none_match(request.headers.get("If-None-Match"), headers["ETag"]):
        return Response(status=304, headers=headers)
    return Response(body, mimetype="application/json", headers=headers)
