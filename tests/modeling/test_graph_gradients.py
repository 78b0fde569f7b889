"""Expressions compiled through the whole pipeline (parser, typed graph, plan), over drawn shapes.

For a drawn shape, function and operator layout, the model has unknowns a (drawn shape, lower
bound 0 so every function's domain holds: x = exp(u)) and b (scalar), a derived quantity built from
them, and a prior on that derived quantity, so the gradient flows backward through every step.
External check: central finite differences from scipy.optimize.approx_fprime.
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from worker.modeling import compile_model

from .central_differences import assert_gradient_close, central_gradient

FUNCTIONS = ["exp", "log", "log1p", "expm1", "sqrt", "square", "abs", "logistic", "softplus",
             "sin", "cos", "tanh", "lgamma"]
SHAPES = st.sampled_from([[], [1], [3], [2, 2], [3, 2]])


def spec_for(shape, expression):
    return {
        "unknowns": {"a": {"shape": shape, "lower": 0}, "b": {}},
        "derived": {"d": expression},
        "priors": [
            {"on": "a", "distribution": "exponential", "arguments": {"rate": 1}},
            {"on": "b", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "d", "distribution": "normal", "arguments": {"location": 0.5, "scale": 3}},
        ],
    }


def check(spec, seed):
    model = compile_model(spec, {})
    rng = np.random.default_rng(seed)
    for _ in range(2):
        u = rng.normal(0.0, 0.6, model.dimension)
        value, gradient = model.log_density_and_gradient(u)
        assert np.isfinite(value)
        numeric = central_gradient(model.log_density, u)
        assert_gradient_close(gradient, numeric, scale=abs(value))


@settings(max_examples=40, deadline=None, derandomize=True)
@given(shape=SHAPES, function=st.sampled_from(FUNCTIONS),
       operator=st.sampled_from(["+", "-", "*", "/", "^"]), b_first=st.booleans(),
       seed=st.integers(0, 2**32 - 1))
def test_function_and_operator(shape, function, operator, b_first, seed):
    # Keep every operation well inside its domain, so that finite differences are accurate: b's
    # side is exp(b) > 0; a power's base is positive (a negative base to a fractional power has no
    # real value) and its exponent bounded (no overflow); a divisor stays at least 1.
    left, right = f"{function}(a)", "exp(b)"
    if b_first:
        left, right = right, left
        if operator == "^":
            right = f"tanh({right})"
        elif operator == "/":
            right = f"1 + square({right})"
    elif operator == "^":
        left = f"exp(tanh({left}))"
    check(spec_for(shape, f"({left}) {operator} ({right})"), seed)


@settings(max_examples=30, deadline=None, derandomize=True)
@given(n=st.integers(1, 5), seed=st.integers(0, 2**32 - 1),
       reduce=st.sampled_from(["sum", "mean"]))
def test_vector_pipeline(n, seed, reduce):
    expression = (f"running_sum(softmax(a) * b) + log_softmax(a) - {reduce}(a) * b "
                  "+ select(a > 1, a, b) + dot(a, a)")
    check(spec_for([n], expression), seed)


@settings(max_examples=30, deadline=None, derandomize=True)
@given(m=st.integers(1, 4), n=st.integers(1, 4), seed=st.integers(0, 2**32 - 1))
def test_matrix_pipeline(m, n, seed):
    rng = np.random.default_rng(seed)
    index = rng.integers(1, m + 1, size=5).tolist()
    spec = spec_for([m, n], "sum(a @ c) + sum(a[rows] @ c) + dot(a[1], c) + a[1, 1] * b")
    spec["unknowns"]["c"] = {"shape": [n]}
    spec["priors"].append({"on": "c", "distribution": "normal",
                           "arguments": {"location": 0, "scale": 1}})
    spec["inputs"] = {"rows": {"type": "integer", "shape": [5]}}
    model = compile_model(spec, {"rows": index})
    u = rng.normal(0.0, 0.6, model.dimension)
    value, gradient = model.log_density_and_gradient(u)
    assert_gradient_close(gradient, central_gradient(model.log_density, u), scale=abs(value))
