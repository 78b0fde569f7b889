"""Reading a request body as JSON, refusing what the plain parser lets through or chokes on.

Python's parser keeps the last of repeated keys (so `"seed": 2026, "seed": 7` would run seed 7),
raises RecursionError on deep nesting, and turns a 400-digit integer into a number no array can
hold. Each is refused here, before anything else looks at the document, with a problem naming
where it is.
"""

from __future__ import annotations

import json
import sys
from typing import Any

from service.problem_details import ApiProblem
from worker.problems import escape_token

# Our own choice: a submission's deepest legitimate part is an array of a few dimensions inside
# two or three objects; 64 levels leaves room for any of them and keeps every later recursive
# walk far from Python's recursion limit.
MAX_DEPTH = 64
LARGEST_FLOAT = sys.float_info.max


class _RepeatedKeys(dict):
    """An object in which some key appeared more than once (the parser's hook marks it)."""

    repeated: list[str]


def _pairs(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    result = dict(pairs)
    if len(result) == len(pairs):
        return result
    seen: set[str] = set()
    marked = _RepeatedKeys(result)
    marked.repeated = [key for key, _ in pairs if key in seen or seen.add(key)]
    return marked


def _bad_json(detail: str, pointer: str, message: str) -> ApiProblem:
    return ApiProblem(400, "invalid-json", "The body is not acceptable JSON", detail,
                      [{"pointer": pointer, "message": message}])


def parse_json_body(data: bytes | str) -> Any:
    """The parsed document; ApiProblem 400 (not JSON, repeated key, too deep) or 422 (a number
    too large to represent)."""
    try:
        document = json.loads(data, object_pairs_hook=_pairs)
    except RecursionError as error:
        raise _bad_json(
            f"The body is nested more deeply than {MAX_DEPTH} levels.", "",
            f"Nested more deeply than {MAX_DEPTH} levels.",
        ) from error
    except (ValueError, UnicodeDecodeError) as error:
        raise _bad_json(
            f"The body could not be parsed: {error}.", "", "The body is not valid JSON."
        ) from error
    _check_document(document)
    return document


def _check_document(document: Any) -> None:
    """One walk on an explicit stack: depth, repeated keys, integers past the float range."""
    stack: list[tuple[Any, str, int]] = [(document, "", 0)]
    while stack:
        value, pointer, depth = stack.pop()
        if isinstance(value, dict | list) and depth >= MAX_DEPTH:
            raise _bad_json(
                f"The body is nested more deeply than {MAX_DEPTH} levels.", pointer,
                f"Nested more deeply than {MAX_DEPTH} levels.",
            )
        if isinstance(value, _RepeatedKeys):
            key = value.repeated[0]
            raise _bad_json(
                f"The key '{key}' appears more than once in one object; JSON objects' keys must "
                "be unique (RFC 8259 section 4), and which one was meant cannot be told.",
                f"{pointer}/{escape_token(key)}", f"The key '{key}' is repeated.",
            )
        if isinstance(value, dict):
            stack.extend((member, f"{pointer}/{escape_token(str(key))}", depth + 1)
                         for key, member in value.items())
        elif isinstance(value, list):
            stack.extend((member, f"{pointer}/{index}", depth + 1)
                         for index, member in enumerate(value))
        elif isinstance(value, int) and not isinstance(value, bool) and abs(value) > LARGEST_FLOAT:
            raise ApiProblem(
                422, "invalid-submission", "The submission is not valid",
                "A number is too large to represent; nothing was stored or queued.",
                [{"pointer": pointer,
                  "message": "This integer is beyond the range of double-precision numbers."}],
            )
