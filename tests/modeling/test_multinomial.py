"""The multinomial distribution (issue 11 item 6), under both parameterisations, against
scipy.stats.multinomial (log mass and moments) and central finite differences
(scipy.optimize.approx_fprime); support checks; spec checks with pointers.

Moments of the multinomial: E x_k = n p_k, var x_k = n p_k (1 - p_k), cov(x_j, x_k) = -n p_j p_k
(Johnson, Kotz & Balakrishnan 1997, Discrete Multivariate Distributions, ch. 35; also
scipy.stats.multinomial.cov, used below).
"""

import copy

import numpy as np
import pytest
from scipy import special, stats

from worker.modeling import check_model, compile_model
from worker.modeling.distributions import find_distribution

from .central_differences import assert_gradient_close, central_gradient

COUNTS = np.array([[1, 2, 3, 0], [0, 4, 1, 2], [5, 0, 0, 0]])
TRIALS = COUNTS.sum(axis=1)


def test_log_mass_matches_scipy_with_probabilities():
    p = np.array([[0.1, 0.2, 0.3, 0.4], [0.25, 0.25, 0.25, 0.25], [0.7, 0.1, 0.1, 0.1]])
    dist = find_distribution("multinomial", {"trials", "probability"})
    got = dist.log_density(COUNTS, {"trials": TRIALS, "probability": p})
    np.testing.assert_allclose(got, stats.multinomial.logpmf(COUNTS, TRIALS, p), rtol=1e-12)
    # one probability vector shared by every row
    got = dist.log_density(COUNTS, {"trials": TRIALS, "probability": p[0]})
    np.testing.assert_allclose(got, stats.multinomial.logpmf(COUNTS, TRIALS, p[0]), rtol=1e-12)


def test_log_mass_matches_scipy_with_log_weights():
    w = np.array([0.3, -1.0, 2.0, 0.0])
    dist = find_distribution("multinomial", {"trials", "log_weights"})
    got = dist.log_density(COUNTS, {"trials": TRIALS, "log_weights": w})
    expected = stats.multinomial.logpmf(COUNTS, TRIALS, special.softmax(w))
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    # softmax is unchanged by adding a constant; the density must be too (no overflow at 1000)
    shifted = dist.log_density(COUNTS, {"trials": TRIALS, "log_weights": w + 1000.0})
    np.testing.assert_allclose(shifted, expected, rtol=1e-12)


def test_zero_probability_with_zero_count_is_allowed():
    dist = find_distribution("multinomial", {"trials", "probability"})
    p = np.array([0.5, 0.5, 0.0])
    got = dist.log_density(np.array([1, 2, 0]), {"trials": np.array(3), "probability": p})
    assert got == pytest.approx(stats.multinomial.logpmf([1, 2, 0], 3, p))
    assert dist.log_density(np.array([1, 1, 1]), {"trials": np.array(3),
                                                  "probability": p}) == -np.inf


@pytest.mark.parametrize(("x", "trials", "why"), [
    ([1, 2, 3], 5, "counts add to 6, not 5"),
    ([1, -1, 3], 3, "a negative count"),
    ([1.5, 0.5, 1], 3, "counts that are not integers"),
])
def test_out_of_support_counts_are_minus_infinity(x, trials, why):
    for form in ({"trials", "probability"}, {"trials", "log_weights"}):
        dist = find_distribution("multinomial", form)
        arg = np.full(3, 1 / 3) if "probability" in form else np.zeros(3)
        args = {"trials": np.array(trials), next(iter(form - {"trials"})): arg}
        assert dist.log_density(np.array(x, dtype=float), args) == -np.inf, why
        assert not dist.variate_valid(np.array(x, dtype=float), args), why


def test_probabilities_off_the_simplex_are_minus_infinity():
    dist = find_distribution("multinomial", {"trials", "probability"})
    for p in ([0.5, 0.6, 0.1], [1.2, -0.1, -0.1]):
        assert dist.log_density(np.array([1, 1, 1]), {"trials": np.array(3),
                                                      "probability": np.array(p)}) == -np.inf


def _model(arguments, counts=COUNTS):
    spec = {
        "inputs": {"y": {"type": "integer", "shape": [3, 4]}, "n": {"type": "integer",
                                                                   "shape": [3]}},
        "unknowns": {"w": {"shape": [4], "structure": "simplex"}, "a": {"shape": [3]}},
        "priors": [
            {"on": "w", "distribution": "dirichlet", "arguments": {"concentration": [2, 2, 2, 2]}},
            {"on": "a", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        ],
        "likelihood": [{"name": "counts", "observed": "y", "distribution": "multinomial",
                        "arguments": arguments}],
        "per_draw": {"replicates": ["counts"], "pointwise": ["counts"]},
    }
    return spec, {"y": counts.tolist(), "n": counts.sum(axis=1).tolist()}


@pytest.mark.parametrize("arguments", [
    {"trials": "n", "probability": "w"},
    {"trials": "n", "log_weights": "[a[1], a[2], a[3], 0]"},
    {"trials": "n", "log_weights": "log(w) + a[1]"},
])
def test_gradients_in_a_model_match_central_differences(arguments):
    spec, data = _model(arguments)
    model = compile_model(spec, data)
    rng = np.random.default_rng(11)
    for _ in range(3):
        u = rng.normal(0.0, 0.7, model.dimension)
        value, gradient = model.log_density_and_gradient(u)
        assert np.isfinite(value)
        assert_gradient_close(gradient, central_gradient(model.log_density, u), scale=abs(value))


def test_pointwise_column_is_scipys_log_mass():
    spec, data = _model({"trials": "n", "log_weights": "[a[1], a[2], a[3], 0]"})
    model = compile_model(spec, data)
    u = np.random.default_rng(2).normal(size=model.dimension)
    row = model.report(u, np.random.default_rng(0))
    a = u[model.dimension - 3:]
    p = special.softmax(np.array([a[0], a[1], a[2], 0.0]))
    pointwise = row[[i for i, n in enumerate(model.quantity_names) if n.startswith("pointwise.")]]
    np.testing.assert_allclose(pointwise, stats.multinomial.logpmf(COUNTS, TRIALS, p),
                               rtol=1e-10)


@pytest.mark.parametrize("form", ["probability", "log_weights"])
def test_draws_match_scipy_moments(form):
    """200 000 draws of 12 trials over 3 outcomes: each mean within 5 standard errors of n p and
    each variance and covariance within 5 standard errors of scipy's cov (standard error of a
    sample moment from its fourth moment, estimated from the draws; common practice)."""
    p = np.array([0.2, 0.5, 0.3])
    arg = p if form == "probability" else np.log(p) + 0.7
    dist = find_distribution("multinomial", {"trials", form})
    draws = dist.sample({"trials": np.array(12), form: arg}, np.random.default_rng(4),
                        (200_000, 3)).astype(float)
    assert draws.shape == (200_000, 3) and np.all(draws.sum(axis=1) == 12)
    m = draws.shape[0]
    mean = stats.multinomial.mean(12, p)
    np.testing.assert_array_less(np.abs(draws.mean(0) - mean),
                                 5 * draws.std(0) / np.sqrt(m))
    centred = draws - draws.mean(0)
    products = centred[:, :, None] * centred[:, None, :]
    cov = products.mean(0)
    se = products.std(0) / np.sqrt(m)
    np.testing.assert_array_less(np.abs(cov - stats.multinomial.cov(12, p)), 5 * se)


def test_prediction_shape_follows_the_arguments():
    spec, data = _model({"trials": "n", "probability": "w"})
    spec["per_draw"]["predictions"] = [{"name": "next", "distribution": "multinomial",
                                         "arguments": {"trials": [3, 9], "probability": "w"}}]
    model = compile_model(spec, data)
    names = [n for n in model.quantity_names if n.startswith("next")]
    assert names == [f"next[{i},{k}]" for i in (1, 2) for k in (1, 2, 3, 4)]
    row = model.report(np.zeros(model.dimension), np.random.default_rng(1))
    draws = row[[model.quantity_names.index(n) for n in names]].reshape(2, 4)
    assert list(draws.sum(axis=1)) == [3, 9]


@pytest.mark.parametrize(("change", "where", "fragment"), [
    (lambda s, d: s["likelihood"][0]["arguments"].update(probability=[0.5, 0.6, 0.1, 0.0]),
     "/model/likelihood/0/arguments/probability", "a non-negative vector summing to 1"),
    (lambda s, d: s["likelihood"][0]["arguments"].update(trials=2.5),
     "/model/likelihood/0/arguments/trials", "a non-negative integer"),
    (lambda s, d: s["likelihood"][0]["arguments"].pop("trials"),
     "/model/likelihood/0/arguments", "(trials, probability) or (trials, log_weights)"),
    (lambda s, d: d.update(n=[6, 8, 5]),
     "/data/y/1", "summing to the argument 'trials'"),
    (lambda s, d: s["inputs"]["y"].update(type="real"),
     "/model/likelihood/0/observed", "integer data"),
    (lambda s, d: s["priors"].append({"on": "a", "distribution": "multinomial",
                                      "arguments": {"trials": 3, "probability": "w"}}),
     "/model/priors/2/distribution", "unknowns are continuous"),
])
def test_bad_arguments_are_reported_at_their_pointer(change, where, fragment):
    spec, data = _model({"trials": "n", "probability": "w"})
    spec, data = copy.deepcopy(spec), copy.deepcopy(data)
    change(spec, data)
    problems = check_model(spec, data)
    assert [p for p in problems if p.pointer == where and fragment in p.message], problems
