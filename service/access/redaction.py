"""A logging filter that blanks credentials: Authorization headers, bearer tokens, raw keys."""

from __future__ import annotations

import logging
import re

# An Authorization header in any spelling, a bearer token, or a bare key wherever it appears.
SECRET_PATTERNS = (
    re.compile(r"(?i)(authorization[\"']?\s*[:=]\s*[\"']?)[^\"',\r\n}]+"),
    re.compile(r"(?i)(bearer\s+)\S+"),
    re.compile(r"()dyk_[0-9a-f]{16}\.[A-Za-z0-9_-]+"),
)
REDACTED = "[redacted]"


def redact(text: str) -> str:
    for pattern in SECRET_PATTERNS:
        text = pattern.sub(lambda m: m.group(1) + REDACTED, text)
    return text


class RedactCredentials(logging.Filter):
    """Rewrites each record's final message, so secrets in arguments are caught too."""

    def filter(self, record: logging.LogRecord) -> bool:
        try:
            message = record.getMessage()
        except (TypeError, ValueError):
            return True
        cleaned = redact(message)
        if cleaned != message:
            record.msg, record.args = cleaned, None
        return True


_FILTER = RedactCredentials()
# gunicorn's loggers do not propagate to the root logger, so their handlers are covered by name.
LOGGER_NAMES = ("", "gunicorn.error", "gunicorn.access", "werkzeug", "flask.app", "celery")


def install_redaction() -> None:
    """Add the filter to every handler of the loggers that can see a request (idempotent)."""
    for name in LOGGER_NAMES:
        logger = logging.getLogger(name)
        logger.addFilter(_FILTER)
        for handler in logger.handlers:
            if _FILTER not in handler.filters:
                handler.addFilter(_FILTER)
