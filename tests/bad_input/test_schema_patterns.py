"""Every pattern in schemas/ anchors at the true end of the string, as ECMA-262 reads "$".

JSON Schema 2020-12 Validation section 6.3.3: patterns are ECMA-262 regular expressions, in which
"$" (no multiline flag) matches only at the end of the input (ECMA-262, 22.2.2.6). Python's "$"
also matches before a final newline; issue 13 item 7 found names ending in a newline accepted for
unknowns, inputs, derived quantities, per-draw formulas and likelihood terms. For each pattern a
string it matches is drawn, then the same string with a newline added must be refused.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from schemas.validation import SchemaValidator
from service.schemas import SCHEMA_FOLDER

# Patterns that only constrain how a string starts (a URL's scheme); the rest of the string is
# checked elsewhere (service/callbacks.py), so they need no end anchor.
PREFIX_PATTERNS = {"^https?://"}


def patterns_in(value: Any) -> Iterator[str]:
    if isinstance(value, dict):
        for key, member in value.items():
            if key == "pattern" and isinstance(member, str):
                yield member
            elif key == "patternProperties" and isinstance(member, dict):
                yield from member
                for sub in member.values():
                    yield from patterns_in(sub)
            else:
                yield from patterns_in(member)
    elif isinstance(value, list):
        for member in value:
            yield from patterns_in(member)


PATTERNS = sorted({p for path in SCHEMA_FOLDER.glob("*.json")
                   for p in patterns_in(json.loads(path.read_text()))})


def test_every_pattern_is_anchored_at_both_ends_or_a_known_prefix():
    assert len(PATTERNS) >= 6
    for pattern in PATTERNS:
        assert pattern in PREFIX_PATTERNS or (pattern.startswith("^") and pattern.endswith("$")), (
            pattern)


@pytest.mark.parametrize("pattern", [p for p in PATTERNS if p not in PREFIX_PATTERNS])
def test_a_final_newline_is_refused_by_every_pattern(pattern: str):
    checker = SchemaValidator({"type": "string", "pattern": pattern})
    body = pattern.removeprefix("^").removesuffix("$")

    @settings(max_examples=25, deadline=None, derandomize=True)
    @given(st.from_regex(re.compile(body), fullmatch=True).filter(lambda s: "\n" not in s))
    def check(text: str) -> None:
        assert checker.is_valid(text), (pattern, text)
        assert not checker.is_valid(text + "\n"), (pattern, text)
        assert not checker.is_valid(text + "\r\n"), (pattern, text)

    check()


def test_the_plain_python_reading_would_let_the_newline_through():
    """The failure mode this guards against, shown on the name pattern itself."""
    assert re.search("^[A-Za-z][A-Za-z0-9_]*$", "mu\n")
    assert not SchemaValidator({"pattern": "^[A-Za-z][A-Za-z0-9_]*$"}).is_valid("mu\n")


@pytest.mark.parametrize("where", ["inputs", "unknowns", "derived", "formulas", "term"])
def test_names_ending_in_a_newline_are_refused_in_every_section(where: str):
    from tests.modeling.test_spec_problems import BASE, DATA
    from worker.modeling import check_model

    spec, data = json.loads(json.dumps(BASE)), dict(DATA)
    if where == "inputs":
        spec["inputs"]["extra\n"] = {"type": "real"}
        data["extra\n"] = 1.0
    elif where == "unknowns":
        spec["unknowns"]["extra\n"] = {"flat_prior": True}
    elif where == "derived":
        spec["derived"]["extra\n"] = "mu"
    elif where == "formulas":
        spec["per_draw"]["formulas"] = {"extra\n": "mu"}
    else:
        spec["likelihood"][0]["name"] = "effects\n"
        spec["per_draw"] = {}
    problems = check_model(spec, data)
    assert problems, where
    assert all(p.pointer.startswith("/model") for p in problems), problems

