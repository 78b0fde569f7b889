"""Whole compiled models: log densities against scipy.stats, gradients against finite differences.

Each model's log density on the unconstrained space is recomputed by hand here: the constrained
values from the textbook transforms (x = exp(u) for a lower bound of 0, x = logistic(u) for (0, 1);
the log-Jacobians log|dx/du| are u and log(x(1 - x)); common practice, e.g. BDA3 section 1.8),
expressions with numpy, densities with scipy.stats. Gradients are checked against central finite
differences from scipy.optimize.approx_fprime.
"""

import numpy as np
import pytest
from scipy import special, stats

from worker.modeling import compile_model
from worker.problems import InvalidSubmission

from .central_differences import assert_gradient_close, central_gradient

# Rubin (1981), as reprinted in BDA3 Table 5.2; from memory.
SCHOOL_EFFECTS = [28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0]
SCHOOL_ERRORS = [15.0, 10.0, 16.0, 11.0, 9.0, 11.0, 10.0, 18.0]

EIGHT_SCHOOLS = {
    "inputs": {"J": {"type": "integer"},
               "y": {"type": "real", "shape": ["J"]},
               "sigma": {"type": "real", "shape": ["J"], "lower": 0}},
    "unknowns": {"mu": {}, "tau": {"lower": 0}, "z": {"shape": ["J"]}},
    "derived": {"theta": "mu + tau * z"},
    "priors": [
        {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 5}},
        {"on": "tau", "distribution": "half_cauchy", "arguments": {"scale": 5}},
        {"on": "z", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
    ],
    "likelihood": [{"name": "effects", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "theta", "scale": "sigma"}}],
    "per_draw": {"replicates": ["effects"], "pointwise": ["effects"],
                  "formulas": {"tau_squared": "tau ^ 2"}},
}
EIGHT_SCHOOLS_DATA = {"J": 8, "y": SCHOOL_EFFECTS, "sigma": SCHOOL_ERRORS}


def eight_schools_by_hand(u):
    y, sigma = np.array(SCHOOL_EFFECTS), np.array(SCHOOL_ERRORS)
    mu, tau, z = u[0], np.exp(u[1]), u[2:]
    theta = mu + tau * z
    return (stats.norm.logpdf(mu, 0, 5) + stats.halfcauchy.logpdf(tau, scale=5) + u[1]
            + stats.norm.logpdf(z).sum() + stats.norm.logpdf(y, theta, sigma).sum())


def points(dimension, count=5, seed=7, spread=1.0):
    rng = np.random.default_rng(seed)
    return [rng.normal(0.0, spread, dimension) for _ in range(count)]


def check_model_gradient(model, u):
    value, gradient = model.log_density_and_gradient(u)
    assert value == pytest.approx(model.log_density(u), rel=1e-12, abs=1e-12)
    numeric = central_gradient(model.log_density, u)
    assert_gradient_close(gradient, numeric, scale=abs(value))


def test_eight_schools_matches_scipy_and_finite_differences():
    model = compile_model(EIGHT_SCHOOLS, EIGHT_SCHOOLS_DATA)
    assert model.dimension == 10
    assert model.unknown_names[:3] == ["mu", "tau", "z[1]"]
    for u in points(model.dimension):
        assert model.log_density(u) == pytest.approx(eight_schools_by_hand(u), rel=1e-11)
        check_model_gradient(model, u)


def test_eight_schools_report_row():
    model = compile_model(EIGHT_SCHOOLS, EIGHT_SCHOOLS_DATA)
    u = points(model.dimension, 1)[0]
    row = model.report(u, np.random.default_rng(3))
    names = model.quantity_names
    assert len(row) == len(names)
    col = {n: row[i] for i, n in enumerate(names)}
    tau = np.exp(u[1])
    theta = u[0] + tau * u[2:]
    assert col["tau"] == pytest.approx(tau)
    assert col["theta[8]"] == pytest.approx(theta[7])
    assert col["tau_squared"] == pytest.approx(tau**2)
    pointwise = [col[f"pointwise.effects[{j}]"] for j in range(1, 9)]
    np.testing.assert_allclose(pointwise, stats.norm.logpdf(SCHOOL_EFFECTS, theta, SCHOOL_ERRORS))
    # replicates come from the generator: the same seed gives the same row, another seed does not
    again = model.report(u, np.random.default_rng(3))
    other = model.report(u, np.random.default_rng(4))
    replicate = [i for i, n in enumerate(names) if n.startswith("replicate.")]
    assert len(replicate) == 8
    np.testing.assert_array_equal(row[replicate], again[replicate])
    assert not np.allclose(row[replicate], other[replicate])


def test_replicates_follow_the_likelihood():
    """Posterior predictive draws for y_j ~ normal(theta_j, sigma_j): z-scores are standard normal.

    With 4000 draws per school the mean of z is within 4 standard errors (4/sqrt(4000)) of 0 and
    its variance within 4 * sqrt(2/4000) of 1 (normal-theory MCSE; common practice).
    """
    model = compile_model(EIGHT_SCHOOLS, EIGHT_SCHOOLS_DATA)
    u = points(model.dimension, 1)[0]
    rng = np.random.default_rng(11)
    names = model.quantity_names
    replicate = [i for i, n in enumerate(names) if n.startswith("replicate.")]
    rows = np.array([model.report(u, rng)[replicate] for _ in range(4000)])
    theta = u[0] + np.exp(u[1]) * u[2:]
    z = (rows - theta) / np.array(SCHOOL_ERRORS)
    n = z.shape[0]
    assert np.all(np.abs(z.mean(axis=0)) < 4 / np.sqrt(n))
    assert np.all(np.abs(z.var(axis=0) - 1) < 4 * np.sqrt(2 / n))


def test_unconstrain_round_trip():
    model = compile_model(EIGHT_SCHOOLS, EIGHT_SCHOOLS_DATA)
    z = np.linspace(-1, 1, 8)
    u = model.unconstrain({"mu": 2.5, "tau": 3.0, "z": z.tolist()})
    assert u[1] == pytest.approx(np.log(3.0))
    row = model.report(u, np.random.default_rng(0))
    np.testing.assert_allclose(row[:10], np.r_[2.5, 3.0, z])
    with pytest.raises(InvalidSubmission) as caught:
        model.unconstrain({"mu": 1.0, "tau": -1.0})
    pointers = {p.pointer for p in caught.value.problems}
    assert pointers == {"/tau", "/z"}


def test_bad_points_give_minus_infinity_without_raising():
    model = compile_model(EIGHT_SCHOOLS, EIGHT_SCHOOLS_DATA)
    for u in (np.full(10, 800.0), np.full(10, np.nan), np.r_[0.0, 1e6, np.zeros(8)]):
        value, gradient = model.log_density_and_gradient(u)
        assert value == -np.inf
        assert gradient.shape == (10,) and np.all(gradient == 0)
        assert model.log_density(u) == -np.inf


STORES = {
    "inputs": {
        "stores": {"type": "integer", "lower": 1},
        "weeks": {"type": "integer"},
        "store": {"type": "integer", "shape": ["weeks"], "lower": 1, "upper": "stores"},
        "sales": {"type": "integer", "shape": ["weeks"], "lower": 0},
    },
    "unknowns": {"mean_log_rate": {}, "spread": {"lower": 0}, "offset": {"shape": ["stores"]}},
    "derived": {"log_rate": "mean_log_rate + spread * offset"},
    "priors": [
        {"on": "mean_log_rate", "distribution": "normal", "arguments": {"location": 3, "scale": 2}},
        {"on": "spread", "distribution": "half_normal", "arguments": {"scale": 1}},
        {"on": "offset", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
    ],
    "likelihood": [{"name": "weekly_sales", "observed": "sales", "distribution": "poisson",
                    "arguments": {"log_rate": "log_rate[store]"}}],
}
STORES_DATA = {"stores": 3, "weeks": 7, "store": [1, 2, 3, 1, 2, 3, 3],
               "sales": [20, 30, 12, 25, 33, 9, 14]}


def test_poisson_with_group_index_matches_scipy():
    model = compile_model(STORES, STORES_DATA)
    store = np.array(STORES_DATA["store"]) - 1
    sales = np.array(STORES_DATA["sales"])
    for u in points(model.dimension):
        spread = np.exp(u[1])
        log_rate = u[0] + spread * u[2:]
        expected = (stats.norm.logpdf(u[0], 3, 2) + stats.halfnorm.logpdf(spread, scale=1) + u[1]
                    + stats.norm.logpdf(u[2:]).sum()
                    + stats.poisson.logpmf(sales, np.exp(log_rate[store])).sum())
        assert model.log_density(u) == pytest.approx(expected, rel=1e-11)
        check_model_gradient(model, u)


# A model that runs through matrix products, row and element indexing, select, softmax,
# log_softmax, running_sum, literals, an interval unknown, a prior on a derived quantity and a
# prior whose scale is an unknown (the generic, non-fused route).
FEATURES = {
    "inputs": {
        "n": {"type": "integer"}, "k": {"type": "integer"},
        "X": {"type": "real", "shape": ["n", "k"]},
        "y": {"type": "real", "shape": ["n"]},
        "g": {"type": "integer", "shape": ["n"], "lower": 1, "upper": "k"},
    },
    "unknowns": {
        "beta": {"shape": ["k"]}, "sigma": {"lower": 0}, "a": {"shape": ["k"]},
        "w": {"shape": ["k"]}, "p": {"lower": 0, "upper": 1}, "spread": {"lower": 0},
    },
    "derived": {
        "mixed": "[[1, p], [p, 1]] @ [beta[1], beta[2]]",
        "shift": "running_sum(a)[g] + log_softmax(w)[g] + 2 * softmax(w)[g]",
        "line": "X @ beta + shift + select(y > 0, p, 1 - p) + dot(X[2], beta) + X[3, 1] * a[2]",
    },
    "priors": [
        {"on": "beta", "distribution": "normal", "arguments": {"location": 0, "scale": 2}},
        {"on": "sigma", "distribution": "lognormal",
         "arguments": {"log_location": 0, "log_scale": 1}},
        {"on": "a", "distribution": "normal", "arguments": {"location": 0, "scale": "spread"}},
        {"on": "spread", "distribution": "exponential", "arguments": {"rate": 1}},
        {"on": "w", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        {"on": "p", "distribution": "beta", "arguments": {"a": 2, "b": 3}},
        # nonlinear (p times beta): the density is checked as written, without a Jacobian
        {"on": "mixed", "distribution": "student_t", "jacobian_omitted_on_purpose": True,
         "arguments": {"degrees_of_freedom": 4, "location": 0, "scale": 3}},
    ],
    "likelihood": [{"name": "outcome", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "line", "scale": "sigma"}}],
}


def features_data(seed=5, n=9, k=3):
    rng = np.random.default_rng(seed)
    return {"n": n, "k": k, "X": rng.normal(size=(n, k)).tolist(),
            "y": rng.normal(size=n).tolist(), "g": rng.integers(1, k + 1, size=n).tolist()}


def features_by_hand(u, data):
    X, y, g = np.array(data["X"]), np.array(data["y"]), np.array(data["g"]) - 1
    k = data["k"]
    beta, a, w = u[0:k], u[k + 1:2 * k + 1], u[2 * k + 1:3 * k + 1]
    sigma, p, spread = np.exp(u[k]), special.expit(u[3 * k + 1]), np.exp(u[3 * k + 2])
    jacobian = u[k] + np.log(p * (1 - p)) + u[3 * k + 2]
    mixed = np.array([[1, p], [p, 1]]) @ beta[:2]
    shift = np.cumsum(a)[g] + (w - special.logsumexp(w))[g] + 2 * special.softmax(w)[g]
    mean = X @ beta + shift + np.where(y > 0, p, 1 - p) + X[1] @ beta + X[2, 0] * a[1]
    return (jacobian + stats.norm.logpdf(beta, 0, 2).sum()
            + stats.lognorm.logpdf(sigma, s=1, scale=1)
            + stats.norm.logpdf(a, 0, spread).sum() + stats.expon.logpdf(spread)
            + stats.norm.logpdf(w).sum() + stats.beta.logpdf(p, 2, 3)
            + stats.t.logpdf(mixed, 4, 0, 3).sum() + stats.norm.logpdf(y, mean, sigma).sum())


def test_feature_model_matches_scipy_and_finite_differences():
    data = features_data()
    model = compile_model(FEATURES, data)
    assert model.dimension == 3 * 3 + 3
    for u in points(model.dimension, spread=0.7):
        assert model.log_density(u) == pytest.approx(features_by_hand(u, data), rel=1e-10)
        check_model_gradient(model, u)


STRUCTURED = {
    "inputs": {"K": {"type": "integer"}, "n": {"type": "integer"},
               "counts": {"type": "integer", "shape": ["n"], "lower": 1, "upper": 4},
               "ratings": {"type": "integer", "shape": ["n"], "lower": 1, "upper": 4},
               "x": {"type": "real", "shape": ["n"]},
               "obs": {"type": "real", "shape": [3]}},
    "unknowns": {
        "mix": {"shape": ["K"], "structure": "simplex"},
        "cut": {"shape": [3], "structure": "ordered"},
        "slope": {},
        "levels": {"shape": [3], "structure": "ordered", "lower": 0},
        "L": {"shape": [3, 3], "structure": "correlation_factor"},
        "centre": {"shape": [3]},
    },
    "derived": {"scaled": "levels * [1, 2, 3]"},
    "priors": [
        {"on": "mix", "distribution": "dirichlet", "arguments": {"concentration": [2, 2, 3, 4]}},
        {"on": "cut", "distribution": "normal", "arguments": {"location": 0, "scale": 3}},
        {"on": "slope", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        {"on": "levels", "distribution": "gamma", "arguments": {"shape": 2, "rate": 1}},
        {"on": "L", "distribution": "lkj_correlation_factor", "arguments": {"concentration": 2}},
        {"on": "centre", "distribution": "normal", "arguments": {"location": 0, "scale": 2}},
    ],
    "likelihood": [
        {"name": "chosen", "observed": "counts", "distribution": "categorical",
         "arguments": {"log_weights": "log(mix)"}},
        {"name": "rated", "observed": "ratings", "distribution": "cumulative_logit",
         "arguments": {"predictor": "slope * x", "cutpoints": "cut"}},
        {"name": "vector", "observed": "obs", "distribution": "multivariate_normal",
         "arguments": {"location": "centre", "covariance_cholesky": "L"}},
    ],
}
STRUCTURED_DATA = {"K": 4, "n": 6, "counts": [1, 2, 2, 4, 3, 1], "ratings": [1, 4, 2, 3, 3, 2],
                   "x": [0.5, -1.0, 0.3, 1.2, -0.4, 0.0], "obs": [0.3, -0.2, 1.1]}


def test_structured_unknowns_gradients():
    """Simplex, ordered, ordered-above-zero and correlation-factor unknowns through vector-valued
    distributions: the whole model's gradient against finite differences."""
    model = compile_model(STRUCTURED, STRUCTURED_DATA)
    assert model.dimension == 3 + 3 + 1 + 3 + 3 + 3
    for u in points(model.dimension, spread=0.5):
        value = model.log_density(u)
        assert np.isfinite(value)
        check_model_gradient(model, u)


def test_structured_values_and_categorical_against_scipy():
    """The categorical and multivariate normal terms against scipy.stats at the reported values."""
    model = compile_model(STRUCTURED, STRUCTURED_DATA)
    u = points(model.dimension, 1, spread=0.5)[0]
    row = model.report(u, np.random.default_rng(0))
    col = dict(zip(model.quantity_names, row, strict=True))
    mix = np.array([col[f"mix[{k}]"] for k in range(1, 5)])
    assert mix.sum() == pytest.approx(1.0) and np.all(mix > 0)
    cut = np.array([col[f"cut[{k}]"] for k in range(1, 4)])
    assert np.all(np.diff(cut) > 0)
    L = np.array([[col[f"L[{i},{j}]"] for j in range(1, 4)] for i in range(1, 4)])
    np.testing.assert_allclose(np.diag(L @ L.T), 1.0)
    assert "scaled[3]" in col and col["scaled[3]"] == pytest.approx(3 * col["levels[3]"])
    # categorical and multivariate normal log mass/density by scipy at these values
    expected_cat = np.log(mix[np.array(STRUCTURED_DATA["counts"]) - 1]).sum()
    centre = np.array([col[f"centre[{k}]"] for k in range(1, 4)])
    expected_mvn = stats.multivariate_normal.logpdf(STRUCTURED_DATA["obs"], centre, L @ L.T)
    expected_dir = stats.dirichlet.logpdf(mix, [2, 2, 3, 4])
    # isolate the two terms: compare the model with one that drops them
    reduced = dict(STRUCTURED, likelihood=[STRUCTURED["likelihood"][1]])
    reduced_model = compile_model(reduced, STRUCTURED_DATA)
    difference = model.log_density(u) - reduced_model.log_density(u)
    assert difference == pytest.approx(expected_cat + expected_mvn, rel=1e-10)
    assert np.isfinite(expected_dir)


def test_logistic_regression_generated_predictions():
    """Predictions for new covariate rows: bernoulli draws with the model's probabilities.

    With 3000 report rows the frequency of 1s per new row is within 4 binomial standard errors of
    logistic(a + x . b) (normal approximation to the binomial; common practice).
    """
    rng = np.random.default_rng(2)
    X = rng.normal(size=(40, 2))
    y = (rng.random(40) < special.expit(X @ [1.0, -1.0])).astype(int)
    new = [[0.0, 0.0], [2.0, 0.0], [0.0, 2.0]]
    spec = {
        "inputs": {"X": {"type": "real", "shape": [40, 2]},
                   "y": {"type": "integer", "shape": [40]},
                   "new_X": {"type": "real", "shape": [3, 2]}},
        "unknowns": {"a": {}, "b": {"shape": [2]}},
        "priors": [{"on": "a", "distribution": "normal", "arguments": {"location": 0, "scale": 2}},
                   {"on": "b", "distribution": "normal", "arguments": {"location": 0, "scale": 2}}],
        "likelihood": [{"name": "outcome", "observed": "y", "distribution": "bernoulli",
                        "arguments": {"log_odds": "a + X @ b"}}],
        "per_draw": {"predictions": [{"name": "new_outcome", "distribution": "bernoulli",
                                       "arguments": {"log_odds": "a + new_X @ b"}}],
                      "formulas": {"new_probability": "logistic(a + new_X @ b)"}},
    }
    # u is (a, b) itself here: without the QR reparametrisation of X @ b (tested on its own in
    # test_reparametrisation.py) the unconstrained point is the user's
    model = compile_model(spec, {"X": X.tolist(), "y": y.tolist(), "new_X": new},
                          reparametrise=False)
    u = np.array([0.2, 0.8, -0.5])
    expected = (stats.norm.logpdf(u, 0, 2).sum()
                + stats.bernoulli.logpmf(y, special.expit(u[0] + X @ u[1:])).sum())
    assert model.log_density(u) == pytest.approx(expected, rel=1e-11)
    check_model_gradient(model, u)
    names = model.quantity_names
    assert names[-6:] == ["new_probability[1]", "new_probability[2]", "new_probability[3]",
                          "new_outcome[1]", "new_outcome[2]", "new_outcome[3]"]
    draws = np.array([model.report(u, rng)[-3:] for _ in range(3000)])
    p = special.expit(u[0] + np.array(new) @ u[1:])
    assert np.all(np.abs(draws.mean(axis=0) - p) < 4 * np.sqrt(p * (1 - p) / 3000))


def test_scalar_and_vector_bounds():
    """Lower and upper bounds other than 0, on scalars (the plan's float path) and on vectors
    (the transforms' path): x = a + exp(u), x = b - exp(u), log-Jacobian u in both cases."""
    spec = {
        "unknowns": {"low": {"lower": 1.5}, "high": {"upper": 2.0},
                     "lows": {"shape": [3], "lower": -1.0}, "highs": {"shape": [2], "upper": 4.0}},
        "priors": [
            {"on": "low", "distribution": "normal", "arguments": {"location": 2, "scale": 1}},
            {"on": "high", "distribution": "normal", "arguments": {"location": 0, "scale": 2}},
            {"on": "lows", "distribution": "normal", "arguments": {"location": 0, "scale": 2}},
            {"on": "highs", "distribution": "normal",
             "arguments": {"location": 3, "scale": "high"}},
        ],
    }
    model = compile_model(spec, {})
    for u in points(model.dimension):
        low, high = 1.5 + np.exp(u[0]), 2.0 - np.exp(u[1])
        lows, highs = -1.0 + np.exp(u[2:5]), 4.0 - np.exp(u[5:7])
        expected = (stats.norm.logpdf(low, 2, 1) + stats.norm.logpdf(high, 0, 2)
                    + stats.norm.logpdf(lows, 0, 2).sum()
                    + (stats.norm.logpdf(highs, 3, high).sum() if high > 0 else -np.inf)
                    + u.sum())
        assert model.log_density(u) == pytest.approx(expected, rel=1e-11)
        if np.isfinite(expected):
            check_model_gradient(model, u)
        row = model.report(u, np.random.default_rng(0))
        np.testing.assert_allclose(row, np.r_[low, high, lows, highs])


def test_prior_arguments_may_be_expressions():
    """A prior whose argument is an expression of unknowns (generic route): scipy.stats.laplace."""
    spec = {"unknowns": {"a": {"shape": [2]}, "s": {"lower": 0}},
            "priors": [{"on": "s", "distribution": "exponential", "arguments": {"rate": 1}},
                       {"on": "a", "distribution": "laplace",
                        "arguments": {"location": "[s, -s]", "scale": "2 * s"}}]}
    model = compile_model(spec, {})
    for u in points(model.dimension):
        s = np.exp(u[2])
        expected = (stats.expon.logpdf(s) + u[2]
                    + stats.laplace.logpdf(u[:2], [s, -s], 2 * s).sum())
        assert model.log_density(u) == pytest.approx(expected, rel=1e-11)
        check_model_gradient(model, u)


def test_report_survives_an_extreme_draw():
    """numpy's Poisson generator refuses rates above about 9.2e18 (numpy documentation,
    Generator.poisson); such a replicate is reported as NaN rather than failing the row."""
    model = compile_model(STORES, STORES_DATA)
    u = np.zeros(model.dimension)
    u[0] = 60.0  # log rate 60: rate e^60, about 1.1e26
    row = model.report(u, np.random.default_rng(0))
    assert row.shape == (len(model.quantity_names),)
    spec = dict(STORES, per_draw={"replicates": ["weekly_sales"]})
    model = compile_model(spec, STORES_DATA)
    row = model.report(u, np.random.default_rng(0))
    assert np.all(np.isnan(row[-7:]))
    assert np.isfinite(row[0])
