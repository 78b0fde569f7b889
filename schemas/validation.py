"""The validator for these schemas: Draft 2020-12 with patterns read as ECMA-262 reads them.

JSON Schema patterns are ECMA-262 regular expressions (JSON Schema 2020-12 Validation, section
6.3.3), where "$" without the multiline flag matches only at the end of the input. Python's "$"
also matches before a final newline, so "mu\\n" would pass "^[A-Za-z][A-Za-z0-9_]*$" and become a
name no one can type. Every unescaped "$" outside a character class is read as "\\Z" here.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from functools import lru_cache
from typing import Any

from jsonschema import Draft202012Validator, ValidationError, validators


def ecma_anchors(pattern: str) -> str:
    """``pattern`` with every end-of-input "$" written as Python's true end, "\\Z"."""
    out: list[str] = []
    escaped = in_class = False
    for char in pattern:
        if escaped:
            escaped = False
        elif char == "\\":
            escaped = True
        elif in_class:
            in_class = char != "]"
        elif char == "[":
            in_class = True
        elif char == "$":
            out.append(r"\Z")
            continue
        out.append(char)
    return "".join(out)


@lru_cache(maxsize=256)
def compiled(pattern: str) -> re.Pattern[str]:
    return re.compile(ecma_anchors(pattern))


def _pattern(validator: Any, pattern: str, instance: Any, schema: Any) -> Iterator[ValidationError]:
    if validator.is_type(instance, "string") and not compiled(pattern).search(instance):
        yield ValidationError(f"{instance!r} does not match {pattern!r}")


def _pattern_properties(
    validator: Any, patterns: dict[str, Any], instance: Any, schema: Any
) -> Iterator[ValidationError]:
    if not validator.is_type(instance, "object"):
        return
    for pattern, subschema in patterns.items():
        for key, value in instance.items():
            if compiled(pattern).search(key):
                yield from validator.descend(value, subschema, path=key, schema_path=pattern)


SchemaValidator = validators.extend(
    Draft202012Validator, {"pattern": _pattern, "patternProperties": _pattern_properties}
)
