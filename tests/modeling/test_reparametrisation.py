"""The automatic QR reparametrisation of `X @ beta` (issue 11 item 4): where it applies, the log
density on the user's scale is unchanged up to the constant log-Jacobian, its gradient agrees with
central finite differences (scipy.optimize.approx_fprime), values map both ways exactly, and
where the engine cannot carry it through it is left off with a reason.

The decomposition: X = QR thin (Golub & Van Loan 2013, Matrix Computations, section 5.2),
Q* = Q sqrt(n - 1), R* = R / sqrt(n - 1), X beta = Q* theta with theta = R* beta.
Data: the Longley (1967) regression, shipped by statsmodels (statsmodels.datasets.longley), whose
raw design has a condition number near 5e9.
"""

import copy

import numpy as np
import pytest
from scipy import stats
from statsmodels.datasets import longley

from worker.modeling import compile_model
from worker.problems import InvalidSubmission

from .central_differences import assert_gradient_close, central_gradient


def _longley():
    frame = longley.load_pandas()
    x = frame.exog.to_numpy(dtype=float)
    return np.column_stack([np.ones(len(x)), x]), frame.endog.to_numpy(dtype=float)


X, Y = _longley()
DATA = {"n": 16, "k": 7, "X": X.tolist(), "y": Y.tolist()}
SPEC = {
    "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
               "X": {"type": "real", "shape": ["n", "k"]}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"beta": {"shape": ["k"]}, "log_sigma": {"flat_prior": True}},
    "derived": {"sigma": "exp(log_sigma)", "fitted": "X @ beta"},
    "priors": [{"on": "beta", "distribution": "normal",
                "arguments": {"location": 0, "scale": 1e6}}],
    "likelihood": [{"name": "y", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "fitted", "scale": "sigma"}}],
    "per_draw": {"formulas": {"first": "beta[1] + 0"}},
}
OLS = np.linalg.lstsq(X, Y, rcond=None)[0]


def _points(rng, count=4):
    """beta near the least-squares fit (within a few standard errors) and log sigma near 5.7."""
    scale = np.abs(OLS) * 0.05 + 1e-3
    return [np.concatenate([OLS + scale * rng.normal(size=7), [5.7 + 0.3 * rng.normal()]])
            for _ in range(count)]


def _user_point(values):
    return {"beta": values[:7].tolist(), "log_sigma": float(values[7])}


def test_applied_and_reported():
    model = compile_model(SPEC, DATA)
    record = model.reparametrisation
    assert record["enabled"] is True and record["not_applied"] == []
    [applied] = record["applied"]
    assert applied["unknown"] == "beta" and applied["data"] == "X"
    assert applied["method"] == "thin QR" and applied["centred_on"] == "y"
    assert applied["condition_number"] == pytest.approx(np.linalg.cond(X), rel=1e-6)


def test_density_on_the_users_scale_is_unchanged_up_to_a_constant():
    """log p(u) = log p(beta, log sigma) + log |det d beta/du|: the difference from the model
    without the reparametrisation is the same constant at every point, and the model without it
    is the plain sum of scipy.stats log densities (prior normal(0, 1e6) on each beta_j)."""
    with_qr = compile_model(SPEC, DATA)
    without = compile_model(SPEC, DATA, reparametrise=False)
    assert without.reparametrisation["applied"] == []
    rng = np.random.default_rng(1967)
    differences = []
    for values in _points(rng):
        point = _user_point(values)
        beta, sigma = values[:7], np.exp(values[7])
        plain = without.log_density(without.unconstrain(point))
        expected = (np.sum(stats.norm.logpdf(beta, 0, 1e6))
                    + np.sum(stats.norm.logpdf(Y, X @ beta, sigma)))
        assert plain == pytest.approx(expected, rel=1e-10)
        differences.append(with_qr.log_density(with_qr.unconstrain(point)) - plain)
    assert np.ptp(differences) < 1e-6 * max(1.0, abs(differences[0]))


def test_gradient_matches_central_differences():
    model = compile_model(SPEC, DATA)
    for values in _points(np.random.default_rng(3), 3):
        u = model.unconstrain(_user_point(values))
        value, gradient = model.log_density_and_gradient(u)
        assert np.isfinite(value)
        assert_gradient_close(gradient, central_gradient(model.log_density, u, 1e-5),
                              scale=abs(value), rtol=1e-5, atol=1e-6)


def test_values_round_trip_and_reports_are_on_the_users_scale():
    model = compile_model(SPEC, DATA)
    values = _points(np.random.default_rng(5), 1)[0]
    u = model.unconstrain(_user_point(values))
    row = model.report(u, np.random.default_rng(0))
    names = model.quantity_names
    beta = row[[names.index(f"beta[{j}]") for j in range(1, 8)]]
    np.testing.assert_allclose(beta, values[:7], rtol=1e-9, atol=1e-9 * np.abs(values[:7]).max())
    fitted = row[[names.index(f"fitted[{i}]") for i in range(1, 17)]]
    np.testing.assert_allclose(fitted, X @ values[:7], rtol=1e-9)
    assert row[names.index("first")] == pytest.approx(values[0], rel=1e-9)


def _changed(change):
    spec = copy.deepcopy(SPEC)
    data = copy.deepcopy(DATA)
    change(spec, data)
    return spec, data


@pytest.mark.parametrize(("change", "reason"), [
    (lambda s, d: s["unknowns"]["beta"].update(lower=-1e9), "has bounds or a structure"),
    (lambda s, d: s["derived"].update(extra="beta[2] * 2", sigma="exp(log_sigma) + extra * 0"),
     "used in the log density other than as X @ beta"),
    (lambda s, d: (s["inputs"].update(Z={"type": "real", "shape": ["n", "k"]}),
                   d.update(Z=(X * 2).tolist()),
                   s["derived"].update(fitted="(X @ beta + Z @ beta) / 3")),
     "more than one data matrix (X, Z)"),
    (lambda s, d: d.update(X=np.column_stack([X[:, :6], X[:, 1] * 2]).tolist()),
     "linearly dependent"),
])
def test_left_off_with_a_reason_where_it_cannot_be_carried_through(change, reason):
    spec, data = _changed(change)
    model = compile_model(spec, data)
    record = model.reparametrisation
    assert record["applied"] == []
    assert [r["unknown"] for r in record["not_applied"]] == ["beta"]
    assert reason in record["not_applied"][0]["reason"]


def test_fewer_rows_than_columns_is_left_off():
    spec = copy.deepcopy(SPEC)
    data = {"n": 5, "k": 7, "X": X[:5].tolist(), "y": Y[:5].tolist()}
    record = compile_model(spec, data).reparametrisation
    assert "5 rows for 7 columns" in record["not_applied"][0]["reason"]


def test_turned_off_by_the_setting():
    record = compile_model(SPEC, DATA, reparametrise=False).reparametrisation
    assert record["enabled"] is False and record["applied"] == []
    assert "reparametrise: false" in record["not_applied"][0]["reason"]


def test_without_a_location_scale_likelihood_it_is_not_centred():
    """A Poisson log-linear predictor X @ beta: the decomposition applies, no centring on data."""
    spec = {
        "inputs": {"n": {"type": "integer"}, "X": {"type": "real", "shape": ["n", 2]},
                   "y": {"type": "integer", "shape": ["n"]}},
        "unknowns": {"beta": {"shape": [2]}},
        "priors": [{"on": "beta", "distribution": "normal",
                    "arguments": {"location": 0, "scale": 2}}],
        "likelihood": [{"name": "y", "observed": "y", "distribution": "poisson",
                        "arguments": {"log_rate": "X @ beta"}}],
    }
    x = np.column_stack([np.ones(6), np.arange(6.0)])
    data = {"n": 6, "X": x.tolist(), "y": [1, 0, 2, 3, 5, 4]}
    model = compile_model(spec, data)
    [applied] = model.reparametrisation["applied"]
    assert applied["centred_on"] is None and applied["spread"] == 1.0
    u = model.unconstrain({"beta": [0.2, 0.3]})
    plain = compile_model(spec, data, reparametrise=False)
    expected = (np.sum(stats.norm.logpdf([0.2, 0.3], 0, 2))
                + np.sum(stats.poisson.logpmf(data["y"], np.exp(x @ [0.2, 0.3]))))
    q, r = np.linalg.qr(x)
    jacobian = -np.sum(np.log(np.abs(np.diagonal(r)) / np.sqrt(5)))
    assert model.log_density(u) == pytest.approx(expected + jacobian, rel=1e-10)
    assert plain.log_density(plain.unconstrain({"beta": [0.2, 0.3]})) == pytest.approx(
        expected, rel=1e-10)


def test_a_coefficient_vector_of_the_wrong_length_is_reported_not_reparametrised():
    spec = copy.deepcopy(SPEC)
    spec["unknowns"]["beta"]["shape"] = [6]
    with pytest.raises(InvalidSubmission) as caught:
        compile_model(spec, DATA)
    assert [p.pointer for p in caught.value.problems] == ["/model/derived/fitted"]


def test_stored_draws_map_back_to_the_sampled_coordinates():
    """unconstrain_draws (used by bridge sampling on stored draws) inverts report on the
    reparametrised unknown: rows reported at points u give those u back."""
    model = compile_model(SPEC, DATA)
    rng = np.random.default_rng(8)
    points = np.array([model.unconstrain(_user_point(v)) for v in _points(rng, 3)])
    width = len(model.unknown_names)
    rows = np.array([model.report(u, rng)[:width] for u in points])
    np.testing.assert_allclose(model.unconstrain_draws(rows), points, rtol=1e-7, atol=1e-7)
