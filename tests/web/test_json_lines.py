"""JSON pointers (RFC 6901) and the one-member-per-line layout of the submit page.

Checked against: Bryan, Zyp & Nottingham (2013), RFC 6901 "JavaScript Object Notation (JSON)
Pointer", section 5 (the example document and the value each example pointer names), and the
standard library's json parser (the laid-out text must read back as the same document).
"""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.web.json_lines import layout, line_of, resolve, split_pointer

# RFC 6901, section 5: the example document.
RFC_DOCUMENT = {
    "foo": ["bar", "baz"],
    "": 0,
    "a/b": 1,
    "c%d": 2,
    "e^f": 3,
    "g|h": 4,
    "i\\j": 5,
    'k"l': 6,
    " ": 7,
    "m~n": 8,
}
# RFC 6901, section 5: each pointer and the value it evaluates to.
RFC_EXAMPLES = [
    ("", RFC_DOCUMENT),
    ("/foo", ["bar", "baz"]),
    ("/foo/0", "bar"),
    ("/", 0),
    ("/a~1b", 1),
    ("/c%d", 2),
    ("/e^f", 3),
    ("/g|h", 4),
    ("/i\\j", 5),
    ('/k"l', 6),
    ("/ ", 7),
    ("/m~0n", 8),
]


@pytest.mark.parametrize(("pointer", "value"), RFC_EXAMPLES)
def test_pointers_resolve_as_rfc_6901_section_5(pointer: str, value: object) -> None:
    assert resolve(RFC_DOCUMENT, pointer) == value


def test_tilde_one_is_unescaped_before_tilde_zero() -> None:
    # RFC 6901, section 4: "~01" becomes "~1", not "/".
    assert split_pointer("/~01") == ["~1"]


@pytest.mark.parametrize("pointer", ["/nothing", "/foo/2", "/foo/01", "/foo/-", "/foo/0/x"])
def test_pointers_to_nothing_raise(pointer: str) -> None:
    # RFC 6901, section 4: leading zeros are not array indices; "-" names no existing element.
    with pytest.raises(LookupError):
        resolve(RFC_DOCUMENT, pointer)


def test_rfc_document_lays_out_with_each_member_on_its_own_line() -> None:
    text, where = layout(RFC_DOCUMENT)
    assert json.loads(text) == RFC_DOCUMENT
    lines = text.splitlines()
    for pointer, _value in RFC_EXAMPLES[1:]:
        key = split_pointer(pointer)[0]
        line = lines[line_of(where, pointer) - 1]
        assert line.lstrip().startswith(json.dumps(key) + ":"), (pointer, line)


def test_a_missing_member_lands_on_the_object_that_should_hold_it() -> None:
    document = {"model": {"likelihood": [{"name": "y", "distribution": "normal"}]}}
    text, where = layout(document)
    lines = text.splitlines()
    # "observed" is missing from likelihood term 0: the line shown is the term's opening brace.
    assert lines[line_of(where, "/model/likelihood/0/observed") - 1].strip() == "{"
    assert line_of(where, "/model/likelihood/0/observed") == line_of(where, "/model/likelihood/0")


def test_elements_of_a_column_of_numbers_land_on_its_one_line() -> None:
    document = {"orders": list(range(500)), "weeks": 500}
    text, where = layout(document)
    assert len(text.splitlines()) == 4
    assert line_of(where, "/orders/317") == line_of(where, "/orders") == 2


json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4)
    | st.dictionaries(st.text(max_size=6), inner, max_size=4),
    max_leaves=25,
)


@settings(max_examples=200, deadline=None)
@given(json_values)
def test_layout_reads_back_and_every_pointer_resolves(document: object) -> None:
    text, where = layout(document)
    assert json.loads(text) == document
    for pointer in where:
        resolve(document, pointer)  # raises if the layout recorded a pointer to nothing
