"""Transforms: round trips, structure of constrained values, and log-Jacobians, their gradients and
the constrain VJP against central finite differences (scipy.optimize.approx_fprime with steps +h
and -h). The log-Jacobian is checked against log|det| (numpy.linalg.slogdet) of the
finite-difference Jacobian of the map from u to the free coordinates of x: every element, the
first K-1 of a simplex, the strictly lower triangle of a correlation matrix's Cholesky factor, the
lower triangle with the diagonal of a covariance matrix's (change of variables, common practice).
The maps themselves are the standard ones: stick-breaking for the simplex, exponentiated
increments for ordered vectors, tanh-transformed canonical partial correlations for correlation
Cholesky factors (Lewandowski, Kurowicka & Joe 2009, section 2), and an exponentiated diagonal for
covariance Cholesky factors.
"""

from __future__ import annotations

from collections.abc import Callable

import hypothesis.extra.numpy as hnp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hs
from scipy.optimize import approx_fprime

from worker.modeling.transforms import Transform, make_transform

SETTINGS = settings(max_examples=30, deadline=None, derandomize=True)

CASES: list[tuple[str, dict, tuple[int, ...], float]] = [
    ("unbounded", {}, (3,), 3.0),
    ("unbounded", {}, (2, 2), 3.0),
    ("lower", {"lower": 1.5}, (3,), 3.0),
    ("lower_vector", {"lower": np.array([0.0, -1.0, 2.0])}, (3,), 3.0),
    ("upper", {"upper": -2.0}, (2, 2), 3.0),
    ("interval", {"lower": -1.0, "upper": 3.0}, (2, 3), 4.0),
    ("interval_scalar", {"lower": 0.0, "upper": 1.0}, (), 4.0),
    ("simplex", {"structure": "simplex"}, (4,), 3.0),
    ("simplex_rows", {"structure": "simplex"}, (2, 3), 3.0),
    ("ordered", {"structure": "ordered"}, (4,), 2.0),
    ("ordered_above", {"structure": "ordered", "lower": 0.0}, (4,), 2.0),
    ("ordered_above_shifted", {"structure": "ordered", "lower": -3.5}, (2, 3), 2.0),
    ("cholesky_2", {"structure": "correlation_factor"}, (2, 2), 2.0),
    ("cholesky_4", {"structure": "correlation_factor"}, (4, 4), 2.0),
    ("covariance_factor_1", {"structure": "covariance_factor"}, (1, 1), 3.0),
    ("covariance_factor_3", {"structure": "covariance_factor"}, (3, 3), 3.0),
]


def build(options: dict, shape: tuple[int, ...]) -> Transform:
    return make_transform(shape, **options)


def free_coordinates(transform: Transform, x: np.ndarray) -> np.ndarray:
    """The coordinates of x that determine it: the target of the Jacobian."""
    if transform.structure == "simplex":
        return x[..., :-1].ravel()
    if transform.structure == "correlation_factor":
        rows, cols = np.tril_indices(x.shape[0], -1)
        return x[rows, cols]
    if transform.structure == "covariance_factor":
        rows, cols = np.tril_indices(x.shape[0])
        return x[rows, cols]
    return np.ravel(x)


def central(f: Callable[[np.ndarray], np.ndarray], v: np.ndarray, h: float = 1e-6) -> np.ndarray:
    return 0.5 * (approx_fprime(v, f, h) + approx_fprime(v, f, -h))


def draw_u(data, transform: Transform, bound: float) -> np.ndarray:
    return data.draw(
        hnp.arrays(np.float64, (transform.dimension,), elements=hs.floats(-bound, bound))
    )


@pytest.mark.parametrize(("label", "options", "shape", "bound"), CASES, ids=[c[0] for c in CASES])
@SETTINGS
@given(data=hs.data())
def test_round_trip_and_structure(label, options, shape, bound, data) -> None:
    transform = build(options, shape)
    u = draw_u(data, transform, bound)
    x = transform.constrain(u)
    assert x.shape == shape
    np.testing.assert_allclose(transform.unconstrain(x), u, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(transform.constrain(transform.unconstrain(x)), x, rtol=1e-12,
                               atol=1e-12)
    structure = transform.structure
    if "lower" in options:
        assert np.all(x > options["lower"])
    if "upper" in options:
        assert np.all(x < options["upper"])
    if structure == "simplex":
        assert np.all(x > 0)
        np.testing.assert_allclose(x.sum(axis=-1), 1.0, rtol=0, atol=1e-14)
    if structure == "ordered":
        assert np.all(np.diff(x, axis=-1) > 0)
    if structure == "correlation_factor":
        assert np.all(np.triu(x, 1) == 0)
        assert np.all(np.diagonal(x) > 0)
        np.testing.assert_allclose(np.sum(x * x, axis=1), 1.0, rtol=0, atol=1e-13)
    if structure == "covariance_factor":
        assert np.all(np.triu(x, 1) == 0)
        assert np.all(np.diagonal(x) > 0)


@pytest.mark.parametrize(("label", "options", "shape", "bound"), CASES, ids=[c[0] for c in CASES])
@SETTINGS
@given(data=hs.data())
def test_log_jacobian_and_derivatives(label, options, shape, bound, data) -> None:
    transform = build(options, shape)
    u = draw_u(data, transform, bound)
    log_jac, grad = transform.log_jacobian_and_gradient(u)
    assert grad.shape == u.shape
    if transform.dimension:
        jacobian = central(lambda v: free_coordinates(transform, transform.constrain(v)), u)
        jacobian = np.atleast_2d(jacobian)
        sign, logdet = np.linalg.slogdet(jacobian)
        assert sign != 0
        assert abs(log_jac - logdet) < 1e-6 * max(1.0, abs(logdet))
        numeric = central(lambda v: transform.log_jacobian_and_gradient(v)[0], u)
        np.testing.assert_allclose(grad, numeric, rtol=1e-6, atol=1e-6)
    upstream = data.draw(hnp.arrays(np.float64, shape, elements=hs.floats(-2, 2)))
    vjp = transform.constrain_vjp(u, upstream)
    assert vjp.shape == u.shape
    if transform.dimension:
        numeric = central(lambda v: float(np.sum(upstream * transform.constrain(v))), u)
        np.testing.assert_allclose(vjp, numeric, rtol=1e-6, atol=1e-6)
    # the fused pass gives the same three results
    x, fused_log_jac, backward = transform.forward(u)
    np.testing.assert_allclose(x, transform.constrain(u), rtol=1e-15, atol=0)
    assert abs(fused_log_jac - log_jac) <= 1e-12 * max(1.0, abs(log_jac))
    np.testing.assert_allclose(backward(upstream), vjp + grad, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize(
    ("options", "shape", "expected"),
    [
        ({}, (), 1),
        ({}, (3, 2), 6),
        ({"lower": 0.0}, (5,), 5),
        ({"structure": "simplex"}, (5,), 4),
        ({"structure": "simplex"}, (3, 5), 12),
        ({"structure": "ordered"}, (5,), 5),
        ({"structure": "ordered", "lower": 0.0}, (5,), 5),
        ({"structure": "correlation_factor"}, (5, 5), 10),
        ({"structure": "correlation_factor"}, (1, 1), 0),
        ({"structure": "covariance_factor"}, (4, 4), 10),
        ({"structure": "covariance_factor"}, (1, 1), 1),
    ],
)
def test_sizes(options: dict, shape: tuple[int, ...], expected: int) -> None:
    """Free parameter counts (common practice): K-1 per simplex, K(K-1)/2 for a K x K correlation
    factor, K(K+1)/2 for a K x K covariance factor."""
    transform = build(options, shape)
    assert transform.size(shape) == expected
    assert transform.dimension == expected
    assert transform.constrain(np.zeros(expected)).shape == shape


def test_simplex_centre() -> None:
    """With the log(K - k) offset, u = 0 maps to the centre of the simplex (stick-breaking with
    the usual offset, common practice)."""
    x = make_transform([5], structure="simplex").constrain(np.zeros(4))
    np.testing.assert_allclose(x, np.full(5, 0.2), rtol=1e-14)


def test_cholesky_identity_at_zero() -> None:
    """Zero partial correlations give the identity factor."""
    x = make_transform([3, 3], structure="correlation_factor").constrain(np.zeros(3))
    np.testing.assert_allclose(x, np.eye(3), atol=1e-15)


def test_unconstrain_outside_support_does_not_raise() -> None:
    with np.errstate(all="raise"):
        u = make_transform([2], lower=0.0).unconstrain(np.array([-1.0, 1.0]))
    assert np.isnan(u[0]) and u[1] == 0.0


def test_unknown_structure_is_rejected() -> None:
    with pytest.raises(ValueError, match="simplex"):
        make_transform([3], structure="sorted")
