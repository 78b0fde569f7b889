"""Every operation's vector-Jacobian product against central finite differences.

External check: scipy.optimize.approx_fprime (combined into a central difference, see
central_differences.py). For random weights w, the VJP of an operation f at x must equal the
gradient of x -> sum(w * f(x)); shapes and values are drawn by hypothesis.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from worker.modeling import operations as ops

from .central_differences import assert_gradient_close, central_gradient

SETTINGS = settings(max_examples=40, deadline=None, derandomize=True)
SHAPES = st.sampled_from([(), (1,), (3,), (5,), (2, 3), (4, 2)])
VECTORS = st.sampled_from([(1,), (2,), (4,), (6,)])


def _values(data, shape, low, high, avoid_zero=False):
    seed = data.draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    x = rng.uniform(low, high, size=shape)
    if avoid_zero:
        # abs and division are not differentiable at 0; keep a margin wider than the FD step
        x = np.where(np.abs(x) < 0.1, 0.1 + np.abs(x), x)
    return np.asarray(x, dtype=float), rng


def check_vjp(op, inputs, rng, which=None):
    """Compare op.backward with finite differences of sum(w * op.forward(...)) per input."""
    inputs = [np.asarray(a, dtype=float) for a in inputs]
    out = np.asarray(op.forward(*inputs))
    w = rng.normal(size=out.shape)
    needs = tuple(True if which is None else k in which for k in range(len(inputs)))
    grads = op.backward(w, inputs, out, needs)
    for k, a in enumerate(inputs):
        if not needs[k]:
            continue

        def f(flat, k=k, a=a):
            args = list(inputs)
            args[k] = flat.reshape(a.shape)
            return float(np.sum(w * op.forward(*args)))

        numeric = central_gradient(f, a.ravel()).reshape(a.shape)
        assert np.shape(grads[k]) == a.shape, (op.name, k, np.shape(grads[k]), a.shape)
        assert_gradient_close(np.asarray(grads[k]), numeric, scale=abs(f(a.ravel())))


DOMAINS = {
    "exp": (-3, 3), "log": (0.2, 5), "log1p": (-0.8, 5), "expm1": (-3, 3), "sqrt": (0.2, 5),
    "square": (-3, 3), "abs": (-3, 3), "logistic": (-5, 5), "logit": (0.05, 0.95),
    "softplus": (-5, 5), "sin": (-3, 3), "cos": (-3, 3), "tanh": (-2, 2), "lgamma": (0.2, 8),
}


@pytest.mark.parametrize("name", sorted(DOMAINS))
@SETTINGS
@given(data=st.data(), shape=SHAPES)
def test_elementwise(name, data, shape):
    low, high = DOMAINS[name]
    x, rng = _values(data, shape, low, high, avoid_zero=(name == "abs"))
    check_vjp(ops.ELEMENTWISE[name], [x], rng)


@pytest.mark.parametrize("operator", ["+", "-", "*", "/", "^"])
@pytest.mark.parametrize("layout", ["same", "scalar_left", "scalar_right"])
@SETTINGS
@given(data=st.data(), shape=SHAPES)
def test_binary(operator, layout, data, shape):
    left_shape = () if layout == "scalar_left" else shape
    right_shape = () if layout == "scalar_right" else shape
    if operator == "^":
        a, rng = _values(data, left_shape, 0.3, 3.0)
        b, _ = _values(data, right_shape, -2.0, 2.0)
    else:
        a, rng = _values(data, left_shape, -3.0, 3.0)
        b, _ = _values(data, right_shape, -3.0, 3.0, avoid_zero=(operator == "/"))
    check_vjp(ops.BINARY[operator], [a, b], rng)


@SETTINGS
@given(data=st.data(), m=st.integers(1, 5), n=st.integers(1, 5), p=st.integers(0, 4))
def test_matrix_product(data, m, n, p):
    a, rng = _values(data, (m, n), -2, 2)
    b, _ = _values(data, (n,) if p == 0 else (n, p), -2, 2)
    check_vjp(ops.BINARY["@"], [a, b], rng)
    # the data-matrix case: only the right operand wants a gradient
    check_vjp(ops.BINARY["@"], [a, b], rng, which={1})


@SETTINGS
@given(data=st.data(), shape=SHAPES)
def test_negate_sum_mean(data, shape):
    x, rng = _values(data, shape, -3, 3)
    check_vjp(ops.NEGATE, [x], rng)
    if shape:
        check_vjp(ops.SUM, [x], rng)
        check_vjp(ops.MEAN, [x], rng)


@SETTINGS
@given(data=st.data(), shape=VECTORS)
def test_vector_functions(data, shape):
    x, rng = _values(data, shape, -3, 3)
    y, _ = _values(data, shape, -3, 3)
    check_vjp(ops.DOT, [x, y], rng)
    check_vjp(ops.SOFTMAX, [x], rng)
    check_vjp(ops.LOG_SOFTMAX, [x], rng)
    check_vjp(ops.RUNNING_SUM, [x], rng)


@SETTINGS
@given(data=st.data(), shape=SHAPES, scalar_branch=st.booleans())
def test_select(data, shape, scalar_branch):
    a, rng = _values(data, shape, -3, 3)
    b, _ = _values(data, () if scalar_branch else shape, -3, 3)
    condition = rng.random(shape) < 0.5
    inputs = [condition, a, b]

    out = ops.SELECT.forward(*inputs)
    w = rng.normal(size=np.shape(out))
    grads = ops.SELECT.backward(w, inputs, out, (False, True, True))
    for k in (1, 2):
        def f(flat, k=k):
            args = list(inputs)
            args[k] = flat.reshape(inputs[k].shape)
            return float(np.sum(w * ops.SELECT.forward(*args)))

        numeric = central_gradient(f, inputs[k].ravel()).reshape(inputs[k].shape)
        assert_gradient_close(np.asarray(grads[k]), numeric)


@SETTINGS
@given(data=st.data(), n=st.integers(1, 6), k=st.integers(1, 12))
def test_gather_with_repeats(data, n, k):
    """theta[group]: repeated groups must add up in the gradient (scatter-add)."""
    x, rng = _values(data, (n,), -3, 3)
    positions = rng.integers(0, n, size=k)
    check_vjp(ops.TakeElements(positions, n), [x], rng)
    check_vjp(ops.TakeElements(np.array(positions[0]), n), [x], rng)


@SETTINGS
@given(data=st.data(), m=st.integers(1, 5), n=st.integers(1, 4), k=st.integers(1, 7))
def test_matrix_indexing(data, m, n, k):
    x, rng = _values(data, (m, n), -3, 3)
    rows = rng.integers(0, m, size=k)
    cols = rng.integers(0, n, size=k)
    check_vjp(ops.TakeRows(rows, (m, n)), [x], rng)
    check_vjp(ops.TakeRows(np.array(rows[0]), (m, n)), [x], rng)
    check_vjp(ops.TakeMatrixElements(rows * n + cols, (m, n)), [x], rng)


@SETTINGS
@given(data=st.data(), rows=st.integers(1, 3), cols=st.integers(1, 3))
def test_literal(data, rows, cols):
    items, rng = _values(data, (rows * cols,), -3, 3)
    scalars = [np.asarray(v) for v in items]
    check_vjp(ops.Stack((rows, cols)), scalars, rng)
    check_vjp(ops.Stack((rows * cols,)), scalars, rng)
