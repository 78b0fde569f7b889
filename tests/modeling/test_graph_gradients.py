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
            # a penalty on d that exercises every operation's gradient, meant without a Jacobian
            {"on": "d", "distribution": "normal", "arguments": {"location": 0.5, "scale": 3},
             "jacobian_omitted_on_purpose": True},
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


FUSIBLE = ["c + a * b", "a * b + c", "c - a * b", "a * b - c", "a * b + a * b"]


@settings(max_examples=30, deadline=None, derandomize=True)
@given(rows=st.integers(1, 6), columns=st.integers(1, 4), expression=st.sampled_from(
    ["c + X @ w", "X @ w + c", "c - X @ w", "X @ w - c"]), scalar_c=st.booleans(),
    seed=st.integers(0, 2**32 - 1))
def test_fused_matrix_product_and_sum(rows, columns, expression, scalar_c, seed):
    """A linear predictor c + X @ w is one step whose sum overwrites the product's array: the
    value has numpy's bits, the gradient agrees with central differences, and the data matrix
    is left as it was."""
    from worker.modeling.operations import ProductCombined

    rng = np.random.default_rng(seed)
    x = rng.normal(size=(rows, columns))
    spec = {
        "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
                   "X": {"type": "real", "shape": ["n", "k"]}},
        "unknowns": {"w": {"shape": ["k"]}, "c": {"shape": [] if scalar_c else ["n"]}},
        "derived": {"d": expression},
        "priors": [
            {"on": "w", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "c", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "d", "distribution": "normal", "arguments": {"location": 0.5, "scale": 3}},
        ],
    }
    data = {"n": rows, "k": columns, "X": x.tolist()}
    # the raw coordinates: u holds w itself, so the value can be compared with numpy's X @ w
    model = compile_model(spec, data, reparametrise=False)
    assert any(isinstance(step[1], ProductCombined) for step in model._density.steps)
    u = rng.normal(0.0, 0.6, model.dimension)
    w, c = u[:columns], (u[columns] if scalar_c else u[columns:])
    for _ in range(2):  # twice: a second call must not see the first one's arrays
        value, gradient = model.log_density_and_gradient(u)
        numeric = central_gradient(model.log_density, u)
        assert_gradient_close(gradient, numeric, scale=abs(value))
    expected = {"c + X @ w": c + x @ w, "X @ w + c": x @ w + c, "c - X @ w": c - x @ w,
                "X @ w - c": x @ w - c}[expression]
    assert np.array_equal(model._report.values_at(u)[model._assembly.derived["d"]], expected)
    assert np.array_equal(model._assembly.graph.nodes[model._assembly.graph.names["X"]].value, x)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(shape=SHAPES, expression=st.sampled_from(FUSIBLE), scalar_c=st.booleans(),
       seed=st.integers(0, 2**32 - 1))
def test_fused_product_and_sum(shape, expression, scalar_c, seed):
    """A product feeding one addition or subtraction becomes one plan step; its value equals the
    same arithmetic done in numpy to the last bit, and its gradient the central differences."""
    from worker.modeling.operations import ProductCombined

    spec = {
        "unknowns": {"a": {"shape": shape}, "b": {}, "c": {"shape": [] if scalar_c else shape}},
        "derived": {"d": expression},
        "priors": [
            {"on": "a", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "b", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "c", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "d", "distribution": "normal", "arguments": {"location": 0.5, "scale": 3},
             "jacobian_omitted_on_purpose": True},
        ],
    }
    model = compile_model(spec, {})
    operations = [step[1] for step in model._density.steps]
    assert any(isinstance(op, ProductCombined) for op in operations)
    check(spec, seed)
    u = np.random.default_rng(seed).normal(0.0, 0.6, model.dimension)
    size = int(np.prod(shape, dtype=int))
    a = u[:size].reshape(shape)
    b = u[size]
    c = u[size + 1:].reshape([] if scalar_c else shape)
    expected = {"c + a * b": c + a * b, "a * b + c": a * b + c, "c - a * b": c - a * b,
                "a * b - c": a * b - c, "a * b + a * b": a * b + a * b}[expression]
    values = model._report.values_at(u)
    assert np.array_equal(values[model._assembly.derived["d"]], expected)


def test_a_product_read_twice_is_not_fused():
    from worker.modeling.operations import Multiply, ProductCombined

    spec = {
        "unknowns": {"a": {"shape": [3]}, "b": {}},
        "derived": {"p": "a * b", "d": "p + a"},
        "priors": [
            {"on": "a", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "b", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "p", "distribution": "normal", "arguments": {"location": 0, "scale": 2},
             "jacobian_omitted_on_purpose": True},
            {"on": "d", "distribution": "normal", "arguments": {"location": 0, "scale": 3},
             "jacobian_omitted_on_purpose": True},
        ],
    }
    model = compile_model(spec, {})
    operations = [step[1] for step in model._density.steps]
    assert not any(isinstance(op, ProductCombined) for op in operations)
    assert any(isinstance(op, Multiply) for op in operations)
    check(spec, 3)
