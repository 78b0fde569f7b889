"""JSON laid out one member per line, with the line each JSON pointer lands on.

The submit page shows a problem beside the line its RFC 6901 pointer names. Arrays of plain
values (numbers, strings, booleans) stay on one line, so a data column of thousands of numbers is
one line, not thousands; a pointer into such an array lands on the array's line.
"""

from __future__ import annotations

import json
from typing import Any

INDENT = "  "


def unescape_token(token: str) -> str:
    """RFC 6901 section 4: "~1" is "/", then "~0" is "~" (in that order)."""
    return token.replace("~1", "/").replace("~0", "~")


def escape_token(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


def split_pointer(pointer: str) -> list[str]:
    """The reference tokens of a pointer ("" is the whole document)."""
    if pointer == "":
        return []
    if not pointer.startswith("/"):
        raise ValueError(f"a JSON pointer starts with '/', got {pointer!r}")
    return [unescape_token(token) for token in pointer[1:].split("/")]


def resolve(document: Any, pointer: str) -> Any:
    """The value a pointer names (RFC 6901 section 4); LookupError when there is none."""
    value = document
    for token in split_pointer(pointer):
        if isinstance(value, dict):
            if token not in value:
                raise LookupError(f"no member {token!r}")
            value = value[token]
        elif isinstance(value, list):
            # RFC 6901 section 4: array indices are decimal digits with no leading zeros
            if not token.isdigit() or (len(token) > 1 and token[0] == "0"):
                raise LookupError(f"{token!r} is not an array index")
            if int(token) >= len(value):
                raise LookupError(f"index {token} is past the end")
            value = value[int(token)]
        else:
            raise LookupError(f"cannot step into a {type(value).__name__} with {token!r}")
    return value


def _plain(value: Any) -> bool:
    return not isinstance(value, dict | list)


def _inline(value: Any) -> str:
    return json.dumps(value, ensure_ascii=False)


def layout(document: Any) -> tuple[str, dict[str, int]]:
    """The text, and for each laid-out value its pointer and 1-based line."""
    lines: list[str] = []
    where: dict[str, int] = {}

    def emit(value: Any, pointer: str, depth: int, prefix: str, suffix: str) -> None:
        where[pointer] = len(lines) + 1
        pad = INDENT * depth
        if isinstance(value, dict) and value:
            lines.append(f"{pad}{prefix}{{")
            items = list(value.items())
            for i, (key, member) in enumerate(items):
                comma = "," if i < len(items) - 1 else ""
                emit(member, f"{pointer}/{escape_token(key)}", depth + 1, f"{_inline(key)}: ",
                     comma)
            lines.append(f"{pad}}}{suffix}")
        elif isinstance(value, list) and value and not all(_plain(v) for v in value):
            lines.append(f"{pad}{prefix}[")
            for i, member in enumerate(value):
                comma = "," if i < len(value) - 1 else ""
                emit(member, f"{pointer}/{i}", depth + 1, "", comma)
            lines.append(f"{pad}]{suffix}")
        else:
            lines.append(f"{pad}{prefix}{_inline(value)}{suffix}")

    emit(document, "", 0, "", "")
    return "\n".join(lines) + "\n", where


def line_of(where: dict[str, int], pointer: str) -> int | None:
    """The line of the value a pointer names, or of its nearest laid-out ancestor.

    A pointer to a member that is missing (a required name left out) lands on the object that
    should hold it; one into a one-line array lands on that array's line.
    """
    try:
        tokens = split_pointer(pointer)
    except ValueError:
        return None
    while True:
        candidate = "".join("/" + escape_token(t) for t in tokens)
        if candidate in where:
            return where[candidate]
        if not tokens:
            return None
        tokens = tokens[:-1]
