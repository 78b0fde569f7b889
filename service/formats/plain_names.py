"""Column names a SQL engine or a dataframe takes without quoting (``?names=plain``).

The display names (``offset[1]``, ``replicate.failures[1]``, ``theta[2,3]``) stay the default;
the plain name replaces each run of characters other than letters, digits and ``_`` by one
``_`` and trims them at the ends: ``offset_1``, ``replicate_failures_1``, ``theta_2_3``. The
mapping depends on the names alone, so it is the same for every job with the same columns;
GET /v1/jobs/{id}/columns serves it with each column's type.
"""

from __future__ import annotations

import re

from service.job_queries import bad_parameter

NAMINGS = ("display", "plain")
_NOT_PLAIN = re.compile(r"[^0-9A-Za-z_]+")


def plain_name(name: str) -> str:
    return _NOT_PLAIN.sub("_", name).strip("_")


def plain_names(names: list[str]) -> list[str]:
    """The plain names, refused (400) if two columns would share one: a name chosen to mimic
    another's plain form (``a_1`` beside ``a[1]``) is the only way, and guessing would mislead."""
    plain = [plain_name(n) for n in names]
    seen: dict[str, str] = {}
    for display, simple in zip(names, plain, strict=True):
        if simple in seen:
            raise bad_parameter(
                "names",
                f"Plain names would give {seen[simple]!r} and {display!r} the same name "
                f"{simple!r}; ask for the display names.",
            )
        seen[simple] = display
    return plain


def chosen_naming(raw: str | None) -> str:
    naming = raw or "display"
    if naming not in NAMINGS:
        raise bad_parameter("names", f"The names are one of {', '.join(NAMINGS)}.")
    return naming
