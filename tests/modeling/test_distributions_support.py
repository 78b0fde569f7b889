"""Supports, boundaries, lookup errors and the LKJ normalising constant.

Sources: scipy.stats for values at the edge of a support; scipy.integrate (quad, dblquad) for
the LKJ density integrating to one over the free coordinates of a Cholesky factor; the volume
pi^2/2 of the set of 3 x 3 correlation matrices (the LKJ(1) normaliser; Lewandowski, Kurowicka &
Joe 2009, section 3.2, from memory); the argument table of DEVELOPERS.md (the project's contract).
"""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import numpy as np
import pytest
import scipy.stats as st
from scipy.integrate import dblquad, quad

from worker.modeling.distributions import (
    SUPPORT_PHRASES,
    VARIATE_PHRASES,
    distribution_names,
    find_distribution,
    parameterisations,
    support_holds,
)

CHOL_2 = np.array([[1.0, 0.0], [0.6, 0.8]])

# (distribution, arguments, a batch of x whose first element is valid and the rest are not)
OUT_OF_SUPPORT = [
    ("normal", {"location": 0.0, "scale": np.array([1.0, -1.0, 0.0, np.nan])}, 0.5),
    ("student_t", {"degrees_of_freedom": np.array([3.0, 0.0]), "location": 0.0, "scale": 1.0}, 0.1),
    ("cauchy", {"location": 0.0, "scale": np.array([1.0, -2.0])}, 0.3),
    ("laplace", {"location": 0.0, "scale": np.array([1.0, 0.0])}, 0.3),
    ("logistic", {"location": 0.0, "scale": np.array([1.0, -1.0])}, 0.3),
    ("lognormal", {"log_location": 0.0, "log_scale": 1.0}, np.array([1.0, 0.0, -1.0])),
    ("exponential", {"rate": 2.0}, np.array([0.5, -0.5])),
    ("exponential", {"rate": np.array([2.0, 0.0, -1.0])}, 0.5),
    ("gamma", {"shape": 2.0, "rate": 1.0}, np.array([1.0, -1.0])),
    ("gamma", {"shape": np.array([2.0, -1.0]), "rate": 1.0}, 1.0),
    ("inverse_gamma", {"shape": 2.0, "scale": 1.0}, np.array([1.0, 0.0, -2.0])),
    ("weibull", {"shape": 1.5, "scale": 1.0}, np.array([1.0, -0.1])),
    ("beta", {"a": 2.0, "b": 2.0}, np.array([0.5, 1.5, -0.5])),
    ("beta", {"a": np.array([2.0, 0.0]), "b": 2.0}, 0.5),
    ("uniform", {"lower": -1.0, "upper": 1.0}, np.array([0.0, 1.5, -1.5])),
    ("uniform", {"lower": np.array([-1.0, 2.0]), "upper": 1.0}, 0.0),
    ("half_normal", {"scale": 1.0}, np.array([0.5, -0.5])),
    ("half_cauchy", {"scale": 1.0}, np.array([0.5, -0.5])),
    ("half_student_t", {"degrees_of_freedom": 3.0, "scale": 1.0}, np.array([0.5, -0.5])),
    ("bernoulli", {"probability": 0.3}, np.array([1, 2, -1])),
    ("bernoulli", {"probability": np.array([0.3, 1.5])}, 1),
    ("bernoulli", {"log_odds": 0.3}, np.array([0.0, 0.5])),
    ("binomial", {"trials": 3, "probability": 0.4}, np.array([2, 4, -1])),
    ("binomial", {"trials": np.array([3.0, 2.5]), "log_odds": 0.0}, 1),
    ("poisson", {"rate": 2.0}, np.array([3.0, 1.5, -1.0])),
    ("poisson", {"rate": np.array([2.0, -1.0])}, 1),
    ("poisson", {"log_rate": 0.5}, np.array([3, -2])),
    ("negative_binomial", {"mean": 2.0, "dispersion": 1.0}, np.array([3, -1])),
    ("negative_binomial", {"log_mean": 0.0, "dispersion": np.array([1.0, 0.0])}, 2),
    ("categorical", {"log_weights": np.zeros(3)}, np.array([2, 0, 4])),
    ("gumbel", {"location": 0.0, "scale": np.array([1.0, 0.0, -1.0])}, 0.3),
    ("skew_normal", {"location": 0.0, "scale": np.array([1.0, -1.0]), "shape": 2.0}, 0.3),
    ("beta_binomial", {"trials": 4, "a": 1.0, "b": 2.0}, np.array([2, 5, -1])),
    ("beta_binomial", {"trials": 4, "a": np.array([1.0, 0.0]), "b": 2.0}, 2),
    ("zero_inflated_poisson", {"zero_probability": 0.2, "rate": 2.0}, np.array([0, -1, 1.5])),
    ("zero_inflated_poisson", {"zero_probability": np.array([0.2, 1.2]), "rate": 2.0}, 0),
    ("multinomial", {"trials": 3, "log_weights": np.zeros(3)},
     np.array([[1, 1, 1], [1, 1, 2]])),
    ("cumulative_logit", {"predictor": 0.0, "cutpoints": np.array([-1.0, 1.0])}, np.array([3, 4])),
    ("cumulative_logit", {"predictor": 0.0,
                          "cutpoints": np.array([[-1.0, 1.0], [1.0, -1.0]])}, 2),
    ("dirichlet", {"concentration": np.ones(3)}, np.array([[0.2, 0.3, 0.5], [0.2, 0.3, 0.6]])),
    ("dirichlet", {"concentration": np.array([[1.0, 2.0], [1.0, -1.0]])}, np.array([0.4, 0.6])),
    ("multivariate_normal",
     {"location": np.zeros(2), "covariance_cholesky": np.stack([CHOL_2, -CHOL_2])}, np.zeros(2)),
    ("lkj_correlation_factor", {"concentration": 2.0},
     np.stack([CHOL_2, np.array([[1.0, 0.0], [0.6, 0.9]])])),
    ("lkj_correlation_factor", {"concentration": np.array([2.0, 0.0])}, CHOL_2),
    ("wishart_factor", {"degrees_of_freedom": 3.0, "scale_cholesky": np.eye(2)},
     np.stack([CHOL_2, -CHOL_2])),
    ("wishart_factor", {"degrees_of_freedom": np.array([3.0, 0.5]), "scale_cholesky": np.eye(2)},
     CHOL_2),
    ("wishart_factor", {"degrees_of_freedom": 3.0,
                        "scale_cholesky": np.stack([np.eye(2), np.zeros((2, 2))])}, CHOL_2),
]


@pytest.mark.parametrize(("name", "args", "x"), OUT_OF_SUPPORT,
                         ids=[f"{c[0]}-{i}" for i, c in enumerate(OUT_OF_SUPPORT)])
def test_out_of_support_is_minus_infinity_without_warnings(name, args, x) -> None:
    dist = find_distribution(name, set(args))
    wrt = frozenset(k for k in args if k != "trials") | (
        frozenset() if dist.discrete else frozenset({"x"})
    )
    with warnings.catch_warnings(), np.errstate(all="raise"):
        warnings.simplefilter("error")
        values = dist.log_density(x, args)
        pair_values, grads = dist.log_density_and_gradients(x, args, wrt)
    assert values.ndim == 1
    assert np.isfinite(values[0])
    assert np.all(values[1:] == -np.inf)
    np.testing.assert_array_equal(values, pair_values)
    for key, g in grads.items():
        assert np.all(np.isfinite(g)), key     # a -inf total still has a usable gradient


def test_edges_of_supports_match_scipy() -> None:
    """Values on the boundary of a support follow scipy.stats."""
    cases = [
        ("exponential", {"rate": 2.0}, 0.0, st.expon.logpdf(0.0, scale=0.5)),
        ("gamma", {"shape": 1.0, "rate": 3.0}, 0.0, st.gamma.logpdf(0.0, 1.0, scale=1 / 3)),
        ("gamma", {"shape": 2.0, "rate": 3.0}, 0.0, st.gamma.logpdf(0.0, 2.0, scale=1 / 3)),
        ("weibull", {"shape": 1.0, "scale": 2.0}, 0.0, st.weibull_min.logpdf(0.0, 1.0, scale=2)),
        ("half_normal", {"scale": 2.0}, 0.0, st.halfnorm.logpdf(0.0, scale=2.0)),
        ("half_cauchy", {"scale": 2.0}, 0.0, st.halfcauchy.logpdf(0.0, scale=2.0)),
        ("beta", {"a": 1.0, "b": 3.0}, 0.0, st.beta.logpdf(0.0, 1.0, 3.0)),
        ("uniform", {"lower": 1.0, "upper": 3.0}, 3.0, st.uniform.logpdf(3.0, 1.0, 2.0)),
        ("poisson", {"rate": 0.0}, 0, st.poisson.logpmf(0, 0.0)),
        ("poisson", {"rate": 0.0}, 2, st.poisson.logpmf(2, 0.0)),
        ("bernoulli", {"probability": 0.0}, 0, st.bernoulli.logpmf(0, 0.0)),
        ("bernoulli", {"probability": 1.0}, 1, st.bernoulli.logpmf(1, 1.0)),
        ("bernoulli", {"probability": 1.0}, 0, st.bernoulli.logpmf(0, 1.0)),
        ("binomial", {"trials": 0, "probability": 0.3}, 0, st.binom.logpmf(0, 0, 0.3)),
    ]
    for name, args, x, expected in cases:
        value = find_distribution(name, set(args)).log_density(x, args)
        assert value == pytest.approx(expected, rel=1e-12, abs=1e-12) or (
            value == expected == -np.inf
        ), name


def test_extreme_log_odds_stay_finite() -> None:
    """softplus form: log P(x = 1 | log_odds = -800) = -800 exactly, where exp would overflow
    (log(logistic(t)) = -log(1 + exp(-t)), common practice)."""
    dist = find_distribution("bernoulli", {"log_odds"})
    values, grads = dist.log_density_and_gradients(
        np.array([1, 0, 0, 1]), {"log_odds": np.array([-800.0, 800.0, -800.0, 800.0])},
        frozenset({"log_odds"}))
    np.testing.assert_allclose(values, [-800.0, -800.0, 0.0, 0.0], atol=1e-300)
    np.testing.assert_allclose(grads["log_odds"], [1.0, -1.0, 0.0, 0.0])


def test_table_of_distributions_is_complete() -> None:
    """Every distribution and argument set of the DEVELOPERS.md table is found."""
    text = (Path(__file__).resolve().parents[2] / "DEVELOPERS.md").read_text()
    table = re.findall(r"^\| ([a-z_, ]+) \| ([^|]+) \|$", text, flags=re.MULTILINE)
    names = {n.strip() for row, _ in table if row.strip() != "distribution"
             for n in row.split(",")}
    assert names == set(distribution_names())
    expected = {
        "binomial": [{"trials", "probability"}, {"trials", "log_odds"}],
        "negative_binomial": [{"mean", "dispersion"}, {"log_mean", "dispersion"}],
        "bernoulli": [{"probability"}, {"log_odds"}],
        "poisson": [{"rate"}, {"log_rate"}],
        "student_t": [{"degrees_of_freedom", "location", "scale"}],
        "lognormal": [{"log_location", "log_scale"}],
        "multivariate_normal": [{"location", "covariance_cholesky"}],
        "cumulative_logit": [{"predictor", "cutpoints"}],
    }
    for name, forms in expected.items():
        assert sorted(map(sorted, forms)) == sorted(map(sorted, parameterisations(name)))
        for form in forms:
            assert find_distribution(name, form).name == name


def test_lookup_errors_list_valid_choices() -> None:
    with pytest.raises(LookupError, match="half_cauchy"):
        find_distribution("halfcauchy", {"scale"})
    with pytest.raises(LookupError, match=r"\(rate\) or \(log_rate\)"):
        find_distribution("poisson", {"mean"})
    with pytest.raises(LookupError, match="location, scale"):
        find_distribution("normal", {"location"})


def test_support_phrases_cover_declared_supports() -> None:
    for name in distribution_names():
        for arguments in parameterisations(name):
            dist = find_distribution(name, set(arguments))
            assert set(dist.argument_support) == set(arguments)
            assert set(dist.argument_support.values()) <= set(SUPPORT_PHRASES)
            assert dist.variate_kind in VARIATE_PHRASES


@pytest.mark.parametrize(
    ("support", "good", "bad"),
    [
        ("real", [0.0, -3.0], [np.inf, np.nan]),
        ("positive", [1e-9, 3.0], [0.0, -1.0]),
        ("nonnegative", [0.0, 2.0], [-1e-12]),
        ("unit", [0.0, 1.0, 0.5], [1.0001, -0.1]),
        ("nonnegative_integer", [0, 3.0], [1.5, -1]),
        ("ordered", [[1.0, 2.0, 3.0]], [[1.0, 1.0], [2.0, 1.0]]),
        ("cholesky_factor", [CHOL_2], [[[1.0, 0.1], [0.0, 1.0]], [[1.0, 0.0], [0.3, -1.0]]]),
    ],
)
def test_support_holds(support, good, bad) -> None:
    for value in good:
        assert support_holds(support, value), value
    for value in bad:
        assert not support_holds(support, value), value


def test_variate_valid_checks_observed_data() -> None:
    counts = find_distribution("poisson", {"rate"})
    np.testing.assert_array_equal(
        counts.variate_valid(np.array([0, 3, -1, 2.5]), {"rate": 1.0}), [True, True, False, False]
    )
    binomial = find_distribution("binomial", {"trials", "log_odds"})
    np.testing.assert_array_equal(
        binomial.variate_valid(np.array([0, 3, 4]), {"trials": np.array([3, 3, 3]), "log_odds": 0}),
        [True, True, False],
    )
    categorical = find_distribution("categorical", {"log_weights"})
    np.testing.assert_array_equal(
        categorical.variate_valid(np.array([1, 3, 4]), {"log_weights": np.zeros(3)}),
        [True, True, False],
    )
    ordered = find_distribution("cumulative_logit", {"predictor", "cutpoints"})
    assert ordered.category_count({"cutpoints": np.zeros(4)}) == 5
    simplex = find_distribution("dirichlet", {"concentration"})
    np.testing.assert_array_equal(
        simplex.variate_valid(np.array([[0.2, 0.8], [0.5, 0.6]]), {"concentration": np.ones(2)}),
        [True, False],
    )
    beta = find_distribution("beta", {"a", "b"})
    np.testing.assert_array_equal(
        beta.variate_valid(np.array([0.0, 0.5, 1.2]), {"a": 1, "b": 1}), [True, True, False]
    )


@pytest.mark.parametrize("eta", [0.7, 1.0, 3.5])
def test_lkj_two_by_two_integrates_to_one(eta: float) -> None:
    """K = 2: the single free coordinate is the correlation r in (-1, 1) (scipy.integrate.quad)."""
    dist = find_distribution("lkj_correlation_factor", {"concentration"})

    def density(r: float) -> float:
        factor = np.array([[1.0, 0.0], [r, np.sqrt(1.0 - r * r)]])
        return float(np.exp(dist.log_density(factor, {"concentration": eta})))

    total, _ = quad(density, -1.0, 1.0, epsabs=1e-11)
    assert total == pytest.approx(1.0, abs=1e-8)


def lkj_three_density(eta: float):
    dist = find_distribution("lkj_correlation_factor", {"concentration"})

    def density(l21: float, l31: float, l32: float) -> float:
        rest = 1.0 - l31 * l31 - l32 * l32
        factor = np.array(
            [[1.0, 0.0, 0.0], [l21, np.sqrt(1.0 - l21 * l21), 0.0],
             [l31, l32, np.sqrt(max(rest, 0.0))]]
        )
        return float(np.exp(dist.log_density(factor, {"concentration": eta})))

    return dist, density


@pytest.mark.parametrize("eta", [1.0, 2.5])
def test_lkj_three_by_three_integrates_to_one(eta: float) -> None:
    """K = 3 over the strictly lower entries: L21 in (-1, 1), (L31, L32) in the unit disc.

    The published density L22^(2 eta - 1) L33^(2 eta - 2) / c is a product of a function of L21
    and one of (L31, L32) (its shape is checked against the formula in test_distributions.py), so
    the triple integral is the product of two lower-dimensional ones through a reference point
    (scipy.integrate.quad and dblquad).
    """
    _, density = lkj_three_density(eta)
    a21, a31, a32 = 0.1, 0.2, -0.3
    along_row_2, _ = quad(lambda l21: density(l21, a31, a32), -1.0, 1.0, epsabs=1e-12)
    over_row_3, _ = dblquad(
        lambda l32, l31: density(a21, l31, l32),
        -1.0, 1.0,
        lambda l31: -np.sqrt(1.0 - l31 * l31), lambda l31: np.sqrt(1.0 - l31 * l31),
        epsabs=1e-10,
    )
    total = along_row_2 * over_row_3 / density(a21, a31, a32)
    assert total == pytest.approx(1.0, abs=1e-6)


def test_lkj_uniform_normaliser_is_the_elliptope_volume() -> None:
    """LKJ(1) is uniform on correlation matrices; for K = 3 their volume is pi^2 / 2, and the
    density on the factor carries the Jacobian L22 (density = L22 / (pi^2 / 2))."""
    dist, _ = lkj_three_density(1.0)
    l21, l31, l32 = 0.3, -0.2, 0.5
    factor = np.array(
        [[1.0, 0.0, 0.0], [l21, np.sqrt(1 - l21**2), 0.0], [l31, l32, np.sqrt(1 - l31**2 - l32**2)]]
    )
    expected = np.log(np.sqrt(1 - l21**2)) - np.log(np.pi**2 / 2)
    assert dist.log_density(factor, {"concentration": 1.0}) == pytest.approx(expected, rel=1e-12)


def test_extreme_linear_predictors_stay_finite() -> None:
    """Far in the tails the log-space forms keep full precision where the naive formulas underflow.

    References (common practice): log(1 - logistic(t)) = -softplus(t); for very negative a and
    b < a, log(logistic(a) - logistic(b)) = a + log(1 - exp(b - a)) up to O(exp(a)); softmax is
    unchanged by adding a constant to every log weight.
    """
    ordered = find_distribution("cumulative_logit", {"predictor", "cutpoints"})
    cutpoints = np.array([-1.0, 0.5, 2.0])
    values = ordered.log_density(np.array([1, 3, 4]), {"predictor": np.array([40.0, -800.0, 900.0]),
                                                       "cutpoints": cutpoints})
    expected = [
        -(40.0 + 1.0) - np.log1p(np.exp(-41.0)),
        (-800.0 - 0.5) + np.log(-np.expm1(-(2.0 - 0.5))),
        0.0,
    ]
    np.testing.assert_allclose(values, expected, rtol=1e-14)

    binomial = find_distribution("binomial", {"trials", "log_odds"})
    value = binomial.log_density(0, {"trials": 10, "log_odds": 750.0})
    assert value == pytest.approx(-7500.0, rel=1e-14)

    categorical = find_distribution("categorical", {"log_weights"})
    w = np.array([0.3, -1.2, 2.0])
    np.testing.assert_allclose(
        categorical.log_density(np.array([1, 2, 3]), {"log_weights": w + 1000.0}),
        categorical.log_density(np.array([1, 2, 3]), {"log_weights": w}),
        rtol=1e-12,
    )

    poisson = find_distribution("poisson", {"log_rate"})
    assert poisson.log_density(0, {"log_rate": -745.0}) == pytest.approx(-np.exp(-745.0), abs=0)
