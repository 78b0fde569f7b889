"""The logging filter blanks credentials wherever they occur in a record's message.

Reference: RFC 6750 section 2.1 (the Authorization request header field carries "Bearer" and the
token); the key format is our own (service/access/keys.py).
"""

from __future__ import annotations

import io
import logging

from service.access.redaction import RedactCredentials

SECRET = "dyk_0123456789abcdef." + "A" * 43


def test_filter_redacts_headers_tokens_and_bare_keys():
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.addFilter(RedactCredentials())
    logger = logging.getLogger("drawyard.test.redaction")
    logger.addHandler(handler)
    logger.propagate = False
    try:
        logger.warning("headers: %s", {"Authorization": f"Bearer {SECRET}"})
        logger.warning("Authorization: Bearer %s", SECRET)
        logger.warning("GET /v1/jobs?token=%s 200", SECRET)
        logger.warning("authorization=Basic dXNlcjpwYXNz")
    finally:
        logger.removeHandler(handler)
    text = stream.getvalue()
    assert SECRET not in text and "A" * 43 not in text
    assert "dXNlcjpwYXNz" not in text
    assert text.count("[redacted]") >= 4
