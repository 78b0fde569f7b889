"""RFC 3339 timestamps in UTC, as the API writes them."""

from __future__ import annotations

from datetime import UTC, datetime


def rfc3339(value: datetime | None) -> str | None:
    if value is None:
        return None
    return value.astimezone(UTC).isoformat(timespec="microseconds").replace("+00:00", "Z")
