"""The expression parser: precedence, the typed graph's folding of constants, and every rejection.

Precedence follows conventional mathematical notation (common practice): ^ binds tightest and
groups to the right (2^3^2 = 2^9), unary minus binds looser than ^ (-2^2 = -4), * / and @ bind
tighter than + -, and operators of equal precedence group to the left (8/2/2 = 2).
"""

import re
from pathlib import Path

import numpy as np
import pytest

from worker.modeling import expressions as ex
from worker.modeling.graph import Graph

MODELING = Path(__file__).resolve().parents[2] / "worker" / "modeling"


def constant_value(text: str) -> np.ndarray:
    graph = Graph()
    node = graph.add_expression(ex.parse(text))
    return graph.nodes[node].value


@pytest.mark.parametrize(("text", "expected"), [
    ("2^3^2", 512.0), ("-2^2", -4.0), ("(-2)^2", 4.0), ("1 - 2 - 3", -4.0), ("8 / 2 / 2", 2.0),
    ("2 * 3 + 4", 10.0), ("2 + 3 * 4", 14.0), ("(2 + 3) * 4", 20.0), ("2 * -3", -6.0),
    ("- - 3", 3.0), ("1.5e2 + .5", 150.5), ("2^-1", 0.5), ("select(2 > 1, 10, 20)", 10.0),
    ("select(1 >= 2, 10, 20)", 20.0), ("sum([1, 2, 3])", 6.0), ("mean([1, 2, 3, 6])", 3.0),
    ("dot([1, 2], [3, 4])", 11.0), ("[[1, 2], [3, 4]][2, 1]", 3.0), ("[4, 5, 6][3]", 6.0),
    ("sum([[1, 2], [3, 4]] @ [1, 1])", 10.0), ("sum(running_sum([1, 2, 3]))", 10.0),
])
def test_precedence_and_constant_folding(text, expected):
    assert float(constant_value(text)) == pytest.approx(expected, rel=1e-15)


def test_functions_fold_to_numpy_values():
    """Elementwise functions against their textbook definitions evaluated by numpy."""
    x = 0.3
    expected = {
        "exp": np.exp(x), "log": np.log(x), "log1p": np.log1p(x), "expm1": np.expm1(x),
        "sqrt": np.sqrt(x), "square": x * x, "abs": x, "logistic": 1 / (1 + np.exp(-x)),
        "logit": np.log(x / (1 - x)), "softplus": np.log(1 + np.exp(x)), "sin": np.sin(x),
        "cos": np.cos(x), "tanh": np.tanh(x), "lgamma": 1.0957979948180756,  # log Gamma(0.3)
    }
    for name, value in expected.items():
        assert float(constant_value(f"{name}({x})")) == pytest.approx(value, rel=1e-12), name
    np.testing.assert_allclose(constant_value("softmax([1, 2])"),
                               np.exp([1, 2]) / np.exp([1, 2]).sum())
    np.testing.assert_allclose(constant_value("log_softmax([1, 2])"),
                               np.log(np.exp([1, 2]) / np.exp([1, 2]).sum()))


def test_long_flat_chain_needs_no_recursion():
    """4000 additions in a row: the tree is 4000 deep but is built without recursion."""
    text = "+".join(["1"] * 4000)
    assert len(text) < ex.MAX_LENGTH
    assert float(constant_value(text)) == 4000.0


REJECTED = [
    ("mu.real", "attribute access ('.') is not allowed"),
    ("x.__class__.__bases__", "attribute access"),
    ("__import__", "names may not begin with an underscore"),
    ("_private + 1", "names may not begin with an underscore"),
    ("eval(1)", "'eval' is not a function of the language"),
    ("exec(1)", "'exec' is not a function of the language"),
    ("open(1)", "'open' is not a function of the language"),
    ("getattr(x, y)", "'getattr' is not a function"),
    ("exp(x=1)", "keyword arguments and assignment"),
    ("x = 1", "keyword arguments and assignment"),
    ("'os'", "strings are not allowed"),
    ('"os"', "strings are not allowed"),
    ("lambda: 1", "lambda-like syntax"),
    ("x[1:2]", "slices"),
    ("x; y", "only one expression"),
    ("{1: 2}", "braces are not allowed"),
    ("x ** 2", "use '^' for powers"),
    ("x % 2", "'%' operator"),
    ("x & y", "select(condition, a, b)"),
    ("x if y else z", "unexpected 'if' after a complete expression"),
    ("x > 0", "comparisons are allowed only as the condition of select"),
    ("select(0 < x < 1, 1, 2)", "comparisons cannot be chained"),
    ("exp(1)(2)", "only the listed functions can be called"),
    ("x[1][2][3, 4, 5]", "at most two indices"),
    ("1 +", "the expression ends too early"),
    ("(1 + 2", "expected ')'"),
    ("[]", "empty brackets"),
    ("1 2", "unexpected '2'"),
    ("3x", "malformed number"),
    ("x # comment", "comments are not allowed"),
    ("`x`", "backquotes"),
    ("\\x", "backslashes"),
    ("(" * 65 + "1" + ")" * 65, "nested more than 64 levels deep"),
    ("exp(" * 70 + "1" + ")" * 70, "nested more than 64 levels deep"),
    ("-" * 100 + "1", "nested more than 64 levels deep"),
    ("[" * 70 + "1" + "]" * 70, "nested more than 64 levels deep"),
    ("x" + "[x" * 70 + "]" * 70, "nested more than 64 levels deep"),
    ("1+" * 6000 + "1", "the limit is 10000"),
]


@pytest.mark.parametrize(("text", "fragment"), REJECTED, ids=[r[1][:30] + f"-{i}"
                                                              for i, r in enumerate(REJECTED)])
def test_parser_rejects(text, fragment):
    with pytest.raises(ex.ExpressionError) as caught:
        ex.parse(text)
    assert fragment in caught.value.message
    assert 0 <= caught.value.position <= len(text)


def test_non_string_is_rejected():
    with pytest.raises(ex.ExpressionError):
        ex.parse(["exp", 1])  # type: ignore[arg-type]


@pytest.mark.parametrize(("text", "fragment"), [
    ("exp", "'exp' is a function; call it as exp(...)"),
    ("undeclared + 1", "'undeclared' is not a declared input"),
    ("dot([1, 2])", "dot() takes 2 arguments, got 1"),
    ("softmax(1)", "softmax() needs a vector"),
    ("sum(2)", "sum() needs a vector or matrix"),
    ("[1, 2] @ [3, 4]", "use dot(a, b)"),
    ("[[1, 2]] @ [1, 2, 3]", "the vector needs length 2"),
    ("[1, 2] + [1, 2, 3]", "shapes [2] and [3] do not match"),
    ("[[1, 2], [3]]", "same number of entries"),
    ("[[1, 2], [3, 4]][1, [1, 2]]", "row and column indices must have the same shape"),
    ("2[1]", "a scalar cannot be indexed"),
    ("[1, 2][1.5]", "indices must be integers"),
    ("[1, 2][3]", "positions run from 1 to 2"),
    ("select(1, 2, 3)", "must be a comparison"),
    ("exp(select(1 > 2, 1, 2) > 1)", "comparisons are allowed only"),
])
def test_type_and_shape_errors(text, fragment):
    with pytest.raises(ex.ExpressionError) as caught:
        constant_value(text)
    assert fragment in caught.value.message


def test_engine_never_hands_text_to_python():
    """A guard on the source itself: no dynamic evaluation or unpickling anywhere in the engine."""
    # the built-ins, not methods of the same name such as re.compile
    builtin_call = re.compile(r"(?<![\w.])(eval|exec|compile|__import__)\s*\(")
    for path in MODELING.rglob("*.py"):
        text = path.read_text()
        assert not builtin_call.search(text), f"{path.name}: {builtin_call.search(text)}"
        assert "pickle" not in text and "ast.parse" not in text, path.name
