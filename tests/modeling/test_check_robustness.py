"""check_model never raises: any JSON value anywhere in a spec or its data gives Problems or none.

Hypothesis replaces one member of a valid spec (or its data) with an arbitrary JSON value; the
check must return a list of Problems (common practice for validating untrusted input: errors are
reported, never thrown). When it returns no problems, compile_model must succeed.
"""

import copy

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from worker.modeling import check_model, compile_model
from worker.modeling import expressions as ex
from worker.modeling.graph import Graph
from worker.modeling.shapes import ValueType
from worker.problems import Problem

from .test_spec_problems import BASE, DATA

JSON = st.recursive(
    st.none() | st.booleans() | st.integers(-10, 10) | st.floats(allow_nan=True)
    | st.sampled_from(["mu", "tau", "z", "y", "theta", "normal", "J", "sigma[1]", "exp(mu)",
                       "mu +", "", "real", "integer", "simplex"]),
    lambda children: st.lists(children, max_size=4)
    | st.dictionaries(st.sampled_from(["type", "shape", "lower", "upper", "on", "name",
                                       "distribution", "arguments", "observed", "scale",
                                       "location", "structure", "flat_prior"]),
                      children, max_size=4),
    max_leaves=10,
)


def paths(value, prefix=()):
    yield prefix
    if isinstance(value, dict):
        for k, v in value.items():
            yield from paths(v, (*prefix, k))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from paths(v, (*prefix, i))


SPEC_PATHS = [p for p in paths(BASE) if p]
DATA_PATHS = [p for p in paths(DATA) if p]


def replace(root, path, new):
    target = root
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = new


@settings(max_examples=150, deadline=None, derandomize=True)
@given(in_spec=st.booleans(), index=st.integers(0, 10_000), new=JSON)
def test_check_model_never_raises(in_spec, index, new):
    spec, data = copy.deepcopy(BASE), copy.deepcopy(DATA)
    if in_spec:
        replace(spec, SPEC_PATHS[index % len(SPEC_PATHS)], new)
    else:
        replace(data, DATA_PATHS[index % len(DATA_PATHS)], new)
    problems = check_model(spec, data)
    assert isinstance(problems, list)
    assert all(isinstance(p, Problem) and p.pointer.startswith(("/model", "/data"))
               and p.message for p in problems)
    if not problems:
        compile_model(spec, data)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(text=st.text(alphabet="xyz12.+-*/^@()[],<>=! _eapslogtd", max_size=40))
def test_expressions_fail_only_with_expression_errors(text):
    """Arbitrary text: parsing and building either succeed or raise ExpressionError."""
    graph = Graph()
    graph.names["x"] = graph.leaf(ValueType("real", (3,)))
    graph.names["y"] = graph.leaf(ValueType("real", ()))
    graph.names["z"] = graph.constant(np.array([1.0, 2.0]), "integer")
    try:
        graph.add_expression(ex.parse(text))
    except ex.ExpressionError as error:
        assert error.message
