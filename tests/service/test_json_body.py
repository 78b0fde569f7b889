"""Reading bodies (service/json_body.py): what Python's parser lets through is refused by name.

RFC 8259 section 4: the names within an object should be unique, and with repeated names the
behaviour of parsers is unpredictable; we refuse them. Issue 13 items 6 and 8.
"""

import pytest

from service.json_body import MAX_DEPTH, parse_json_body
from service.problem_details import ApiProblem


def refusal(text: str) -> ApiProblem:
    with pytest.raises(ApiProblem) as caught:
        parse_json_body(text)
    return caught.value


def test_a_repeated_key_is_a_400_at_that_key_wherever_it_is():
    problem = refusal('{"sampler": {"seed": 2026, "seed": 7}}')
    assert problem.status == 400
    assert problem.errors[0]["pointer"] == "/sampler/seed"
    assert "'seed'" in problem.detail
    deep = refusal('{"data": {"y": [1, {"a/b": 1, "a/b": 2}]}}')
    assert deep.errors[0]["pointer"] == "/data/y/1/a~1b"


def test_nesting_a_hundred_thousand_deep_is_a_400_not_a_recursion_error():
    assert refusal("[" * 100_000 + "]" * 100_000).status == 400
    problem = refusal('{"data": {"x": ' + "[" * 80 + "]" * 80 + "}}")
    assert problem.status == 400
    assert problem.errors[0]["pointer"].startswith("/data/x/0")
    assert parse_json_body("[" * (MAX_DEPTH - 1) + "]" * (MAX_DEPTH - 1))


def test_an_integer_beyond_double_precision_is_a_422_at_its_place():
    problem = refusal('{"data": {"y": [1, 1' + "0" * 400 + "]}}")
    assert (problem.status, problem.errors[0]["pointer"]) == (422, "/data/y/1")
    # 2^1023 is within range (the largest double is about 1.8e308), true and false are not numbers.
    big = 2**1023
    assert parse_json_body(f'{{"n": {big}, "flag": true}}') == {"n": big, "flag": True}


def test_ordinary_documents_come_back_as_plain_dicts():
    document = parse_json_body('{"a": {"b": [1, 2.5, null]}, "c": "x"}')
    assert document == {"a": {"b": [1, 2.5, None]}, "c": "x"}
    assert type(document["a"]) is dict
