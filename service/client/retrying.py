"""When to try a request again and how long to wait first.

Waits grow exponentially with "full jitter" (each wait drawn uniformly between zero and the
exponential ceiling) so that many clients refused at once do not come back at once. A
`Retry-After` header (RFC 9110 section 10.2.3: a number of seconds or an HTTP-date) is obeyed as
the server's own estimate and replaces the drawn wait.
"""

from __future__ import annotations

import email.utils
import math
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np

# 429 Too Many Requests (RFC 6585) and 503 Service Unavailable (RFC 9110) say "later", not "no".
RETRY_STATUSES = frozenset({429, 503})


@dataclass(frozen=True)
class RetryPolicy:
    """How many times and how patiently to repeat a request the service asked us to repeat."""

    retries: int = 5  # repeats after the first try
    base_seconds: float = 0.5  # ceiling of the first drawn wait
    cap_seconds: float = 30.0  # no drawn wait above this
    # A Retry-After longer than this is not waited for: the error goes to the caller instead,
    # because a pipeline step blocked for an hour without saying so is worse than a clear failure.
    max_retry_after_seconds: float = 300.0

    def backoff(self, attempt: int, rng: np.random.Generator) -> float:
        """The wait before repeat number `attempt` (0-based) when the server named none."""
        ceiling = min(self.cap_seconds, self.base_seconds * 2.0**attempt)
        return float(rng.uniform(0.0, ceiling))


def parse_retry_after(value: str | None, now: datetime | None = None) -> float | None:
    """Seconds to wait from a Retry-After value, or None when absent or unreadable.

    RFC 9110 section 10.2.3: `delay-seconds` (a non-negative integer) or an HTTP-date; a date in
    the past means "now" (zero).
    """
    if value is None:
        return None
    text = value.strip()
    if text.isdigit():
        return float(int(text))
    try:
        when = email.utils.parsedate_to_datetime(text)
    except (TypeError, ValueError, IndexError):
        return None
    if when is None:
        return None
    if when.tzinfo is None:
        # RFC 9110 section 5.6.7: HTTP-dates are always UTC ("GMT").
        when = when.replace(tzinfo=UTC)
    now = now or datetime.now(UTC)
    seconds = (when - now).total_seconds()
    return max(0.0, math.ceil(seconds * 1000) / 1000)
