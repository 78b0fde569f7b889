"""Canonical JSON and its SHA-256: the fingerprints the audit record and idempotency rely on.

New jobs use the JSON Canonicalization Scheme (RFC 8785, Rundgren, Jordan and Erdtman, 2020):
object members sorted by the UTF-16 code units of their names, no insignificant whitespace,
strings escaped as ECMAScript's JSON.stringify does, numbers written as ECMAScript writes an IEEE
754 double (ECMA-262, Number::toString), all in UTF-8. Any other implementation of the RFC gives
the same bytes, so a reviewer can check a digest without this program.

Jobs stored before migration 0008 were digested with the earlier scheme, sorted keys and
Python's number formatting; each job records its scheme's name (``digest_scheme``) so those
digests stay verifiable.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Callable
from decimal import Decimal
from typing import Any

from worker.problems import escape_token

NOT_JSON_NUMBER = "NaN and infinity are not JSON numbers; give a finite number or leave it out."

JCS = "rfc8785"
SORTED_KEYS = "sorted-keys-v1"
CURRENT_SCHEME = JCS


def sorted_keys_json(value: Any) -> bytes:
    """The scheme before 0008: sorted keys, no insignificant whitespace, Python's numbers."""
    return json.dumps(
        value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


def ecmascript_number(value: float) -> str:
    """A double as ECMAScript's Number::toString writes it (ECMA-262 section 6.1.6.1.20), which
    RFC 8785 section 3.2.2.3 prescribes. Python's repr gives the same shortest round-tripping
    digits; only where the decimal point and exponent go differs."""
    if not math.isfinite(value):
        raise ValueError(NOT_JSON_NUMBER)
    if value == 0:
        return "0"  # also for -0 (RFC 8785 section 3.2.2.3)
    sign = "-" if value < 0 else ""
    digits_tuple = Decimal(repr(abs(value))).normalize().as_tuple()
    digits = "".join(map(str, digits_tuple.digits))
    k = len(digits)
    n = digits_tuple.exponent + k  # value = 0.digits * 10**n
    if k <= n <= 21:
        text = digits + "0" * (n - k)
    elif 0 < n <= 21:
        text = f"{digits[:n]}.{digits[n:]}"
    elif -6 < n <= 0:
        text = "0." + "0" * (-n) + digits
    else:
        exponent = n - 1
        mantissa = digits if k == 1 else f"{digits[0]}.{digits[1:]}"
        text = f"{mantissa}e{'+' if exponent >= 0 else '-'}{abs(exponent)}"
    return sign + text


def _jcs_string(text: str) -> str:
    # json.dumps with ensure_ascii=False escapes exactly what JSON.stringify does: the quote, the
    # backslash, and controls below U+0020 (short forms where JSON has them, else \u00xx in lower
    # case); everything else is written as itself.
    return json.dumps(text, ensure_ascii=False)


def _jcs(value: Any) -> str:
    if value is None:
        return "null"
    if value is True:
        return "true"
    if value is False:
        return "false"
    if isinstance(value, str):
        return _jcs_string(value)
    if isinstance(value, int):
        # JSON numbers are doubles under RFC 8785 (I-JSON, RFC 7493); integers a double holds
        # exactly are written as themselves.
        return str(value) if abs(value) <= 2**53 else ecmascript_number(float(value))
    if isinstance(value, float):
        return ecmascript_number(value)
    if isinstance(value, dict):
        names = sorted(value, key=lambda name: str(name).encode("utf-16-be"))
        members = (f"{_jcs_string(str(name))}:{_jcs(value[name])}" for name in names)
        return "{" + ",".join(members) + "}"
    if isinstance(value, list | tuple):
        return "[" + ",".join(_jcs(item) for item in value) + "]"
    raise TypeError(f"{type(value).__name__} is not a JSON value")


def jcs_json(value: Any) -> bytes:
    """RFC 8785 canonical bytes of a parsed JSON value."""
    # A lone surrogate (which the JSON parser lets through from \ud800) is no Unicode text:
    # encoding refuses it, as the RFC requires.
    return _jcs(value).encode("utf-8")


SCHEMES: dict[str, Callable[[Any], bytes]] = {JCS: jcs_json, SORTED_KEYS: sorted_keys_json}


def canonical_json(value: Any, scheme: str = CURRENT_SCHEME) -> bytes:
    """The canonical bytes of ``value`` under ``scheme``; equal documents give equal bytes."""
    return SCHEMES[scheme](value)


def sha256_of_json(value: Any, scheme: str = CURRENT_SCHEME) -> str:
    return hashlib.sha256(canonical_json(value, scheme)).hexdigest()


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
