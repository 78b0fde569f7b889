"""RFC 8785 (Rundgren, Jordan and Erdtman, 2020, "JSON Canonicalization Scheme") on its own
published examples (service/canonical.py).

The expected texts are the RFC's section 3.2.2 and 3.2.3 examples and its Appendix B number table,
written here from memory of the RFC (this machine cannot fetch it); each of them also follows from
the ECMA-262 Number::toString rules the RFC cites.
"""

from __future__ import annotations

import hashlib
import json
import struct

import pytest

from service.canonical import JCS, SORTED_KEYS, canonical_json, jcs_json, sha256_of_json

# RFC 8785 Appendix B: IEEE 754 bit patterns and the text every conforming writer gives them.
APPENDIX_B = [
    ("0000000000000000", "0"),
    ("8000000000000000", "0"),
    ("0000000000000001", "5e-324"),
    ("8000000000000001", "-5e-324"),
    ("7fefffffffffffff", "1.7976931348623157e+308"),
    ("ffefffffffffffff", "-1.7976931348623157e+308"),
    ("4340000000000000", "9007199254740992"),
    ("c340000000000000", "-9007199254740992"),
    ("4430000000000000", "295147905179352830000"),
    ("44b52d02c7e14af5", "9.999999999999997e+22"),
    ("44b52d02c7e14af6", "1e+23"),
    ("44b52d02c7e14af7", "1.0000000000000001e+23"),
    ("444b1ae4d6e2ef4e", "999999999999999700000"),
    ("444b1ae4d6e2ef4f", "999999999999999900000"),
    ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"),
    ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("41b3de4355555553", "333333333.3333332"),
    ("41b3de4355555554", "333333333.33333325"),
    ("41b3de4355555555", "333333333.3333333"),
    ("41b3de4355555556", "333333333.3333334"),
    ("41b3de4355555557", "333333333.33333343"),
    ("becbf647612f3696", "-0.0000033333333333333333"),
    ("43143ff3c1cb0959", "1424953923781206.2"),
]


@pytest.mark.parametrize(("bits", "expected"), APPENDIX_B)
def test_numbers_are_written_as_the_rfc_appendix_b_lists(bits: str, expected: str) -> None:
    (value,) = struct.unpack(">d", bytes.fromhex(bits))
    assert jcs_json(value) == expected.encode()


def test_the_rfc_section_3_2_2_example() -> None:
    source = (
        '{"numbers": [333333333.33333329, 1E30, 4.50, 2e-3, 0.000000000000000000000000001],'
        ' "string": "\\u20ac$\\u000F\\u000aA\'\\u0042\\u0022\\u005c\\\\\\"\\/",'
        ' "literals": [null, true, false]}'
    )
    expected = (
        '{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,1e-27],'
        '"string":"\u20ac$\\u000f\\nA\'B\\"\\\\\\\\\\"/"}'
    )
    assert jcs_json(json.loads(source)) == expected.encode("utf-8")


def test_members_sort_by_utf16_code_units_as_in_section_3_2_3() -> None:
    """The emoji (a surrogate pair, D83D DE00) sorts before U+FB33 in UTF-16 although its code
    point is larger: the order the RFC's example shows."""
    source = {
        "\u20ac": "Euro Sign",
        "\r": "Carriage Return",
        "\ufb33": "Hebrew Letter Dalet With Dagesh",
        "1": "One",
        "\U0001f600": "Emoji: Grinning Face",
        "\u0080": "Control",
        "\u00f6": "Latin Small Letter O With Diaeresis",
    }
    names = list(json.loads(jcs_json(source)))
    assert names == ["\r", "1", "\u0080", "\u00f6", "\u20ac", "\U0001f600", "\ufb33"]


def test_non_finite_numbers_and_lone_surrogates_are_refused() -> None:
    for bad in (float("nan"), float("inf"), {"a": [float("-inf")]}, "\ud800"):
        with pytest.raises(ValueError):
            jcs_json(bad)


def test_the_earlier_scheme_stays_available_for_older_jobs() -> None:
    """A job digested before migration 0007 is checked with its recorded scheme: the same bytes
    as the store wrote then (sorted keys, Python's number text), which differ from RFC 8785 on
    numbers such as 1e30."""
    value = {"b": 1e30, "a": [4.5]}
    assert canonical_json(value, SORTED_KEYS) == b'{"a":[4.5],"b":1e+30}'
    assert canonical_json(value, JCS) == b'{"a":[4.5],"b":1e+30}'
    assert canonical_json({"x": 1e-7}, SORTED_KEYS) == b'{"x":1e-07}'
    assert canonical_json({"x": 1e-7}, JCS) == b'{"x":1e-7}'
    assert sha256_of_json({"x": 1e-7}) == hashlib.sha256(b'{"x":1e-7}').hexdigest()
