"""Integer unknowns in the compiled model: the point layout, held values, and full conditionals.

References: scipy.stats (poisson.logpmf, norm.logpdf) for every log density and conditional,
computed here term by term from the model's definition; the full conditional of a discrete
unknown is its joint density at each value of its support, normalised (Geman & Geman 1984;
Gelfand & Smith 1990). The data are invented for these checks.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import logsumexp

from worker.modeling import compile_model
from worker.problems import InvalidSubmission

COUNTS = [3, 5, 4, 6, 2, 1, 0, 2, 1, 1]


def change_point() -> tuple[dict, dict]:
    spec = {
        "likelihood": [{"name": "counts", "observed": "y", "distribution": "poisson",
                        "arguments": {"rate": "select(period < change, early, late)"}}],
        "inputs": {"n": {"type": "integer"}, "y": {"type": "integer", "shape": ["n"]},
                   "period": {"type": "integer", "shape": ["n"]}},
        "unknowns": {"early": {"lower": 0}, "late": {"lower": 0},
                     "change": {"type": "integer", "lower": 2, "upper": "n", "flat_prior": True}},
        "priors": [{"on": "early", "distribution": "gamma", "arguments": {"shape": 2, "rate": 1}},
                   {"on": "late", "distribution": "gamma", "arguments": {"shape": 2, "rate": 1}}],
    }
    return spec, {"n": len(COUNTS), "y": COUNTS, "period": list(range(1, len(COUNTS) + 1))}


def mixture() -> tuple[dict, dict]:
    spec = {
        "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                        "arguments": {"location": "mu[z]", "scale": "noise"}}],
        "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
        "unknowns": {"mu": {"shape": [2]}, "noise": {"lower": 0},
                     "z": {"type": "integer", "shape": ["n"], "lower": 1, "upper": 2}},
        "priors": [
            {"on": "mu", "distribution": "normal", "arguments": {"location": [-2, 2], "scale": 1}},
            {"on": "noise", "distribution": "half_normal", "arguments": {"scale": 1}},
            {"on": "z", "distribution": "categorical", "arguments": {"log_weights": [0.3, -0.2]}},
        ],
    }
    return spec, {"n": 5, "y": [-2.1, -1.4, 0.2, 1.9, 2.6]}


def test_the_point_puts_integer_values_after_the_continuous_coordinates():
    model = compile_model(*change_point())
    assert (model.dimension, model.discrete_size, model.point_size) == (2, 1, 3)
    assert model.unknown_names == ["early", "late", "change"]
    assert "change" in model.integer_quantities
    point = model.unconstrain({"early": 3.0, "late": 1.0, "change": 5})
    assert point[2] == 5.0 and point[0] == pytest.approx(np.log(3.0))


def test_log_density_holds_the_integer_and_differentiates_the_rest():
    model = compile_model(*change_point())
    early, late, change = 3.0, 1.2, 6
    point = model.unconstrain({"early": early, "late": late, "change": change})
    y, period = np.array(COUNTS), np.arange(1, 11)
    rate = np.where(period < change, early, late)
    # log-Jacobians of x = exp(u): u = log x for each rate
    expected = (stats.poisson.logpmf(y, rate).sum() + stats.gamma.logpdf(early, 2)
                + stats.gamma.logpdf(late, 2) + np.log(early) + np.log(late))
    value, gradient = model.log_density_and_gradient(point)
    assert value == pytest.approx(expected, rel=1e-12)
    assert gradient.shape == (2,)
    # d/du of the same sum by central differences (scipy-free, common practice)
    h = 1e-6
    for i in range(2):
        up, down = point.copy(), point.copy()
        up[i] += h
        down[i] -= h
        assert gradient[i] == pytest.approx((model.log_density(up) - model.log_density(down))
                                            / (2 * h), rel=1e-6)


def test_change_point_conditional_is_the_normalised_joint_over_the_support():
    model = compile_model(*change_point())
    point = model.unconstrain({"early": 3.0, "late": 1.2, "change": 4})
    (conditional,) = model.conditionals
    assert conditional.block.independent and conditional.batched
    weights = conditional.log_weights(point)[:, 0]
    y, period = np.array(COUNTS), np.arange(1, 11)
    direct = np.array([stats.poisson.logpmf(y, np.where(period < c, 3.0, 1.2)).sum()
                       for c in range(2, 11)])
    assert np.allclose(weights - logsumexp(weights), direct - logsumexp(direct), atol=1e-12)
    conditional.batched = False  # the value-by-value route gives the same weights
    assert np.allclose(conditional.log_weights(point)[:, 0], weights, atol=1e-12)


def test_mixture_indicators_are_weighed_together_and_match_scipy():
    model = compile_model(*mixture())
    point = model.unconstrain({"mu": [-1.5, 2.2], "noise": 0.8, "z": [1, 1, 2, 2, 1]})
    (conditional,) = model.conditionals
    assert conditional.block.independent and conditional.batched
    weights = conditional.log_weights(point)
    y = np.array([-2.1, -1.4, 0.2, 1.9, 2.6])
    prior = np.array([0.3, -0.2]) - logsumexp([0.3, -0.2])
    direct = np.stack([stats.norm.logpdf(y, m, 0.8) + prior[k]
                       for k, m in enumerate([-1.5, 2.2])])
    assert np.allclose(weights - logsumexp(weights, axis=0),
                       direct - logsumexp(direct, axis=0), atol=1e-12)


def test_mixture_gradient_flows_through_the_indicator_index():
    model = compile_model(*mixture())
    point = model.unconstrain({"mu": [-1.5, 2.2], "noise": 0.8, "z": [1, 1, 2, 2, 1]})
    _, gradient = model.log_density_and_gradient(point)
    y, z = np.array([-2.1, -1.4, 0.2, 1.9, 2.6]), np.array([0, 0, 1, 1, 0])
    mu = np.array([-1.5, 2.2])
    # d/dmu_k: prior -(mu_k - m_k) plus the sum over rows in component k of (y - mu_k)/noise^2
    expected = -(mu - np.array([-2, 2])) + np.array(
        [np.sum((y[z == k] - mu[k]) / 0.64) for k in range(2)])
    assert np.allclose(gradient[:2], expected, atol=1e-10)


def test_coupled_indicators_are_weighed_one_element_at_a_time():
    spec = {
        "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                        "arguments": {"location": "X @ (gamma * beta)", "scale": 1}}],
        "inputs": {"n": {"type": "integer"}, "p": {"type": "integer"},
                   "y": {"type": "real", "shape": ["n"]}, "X": {"type": "real",
                                                             "shape": ["n", "p"]}},
        "unknowns": {"beta": {"shape": ["p"]},
                     "gamma": {"type": "integer", "shape": ["p"], "lower": 0, "upper": 1}},
        "priors": [
            {"on": "beta", "distribution": "normal", "arguments": {"location": 0, "scale": 2}},
            {"on": "gamma", "distribution": "bernoulli", "arguments": {"probability": 0.3}},
        ],
    }
    rng = np.random.default_rng(4)
    X = rng.normal(size=(6, 3))
    y = X @ np.array([1.0, 0.0, -0.5]) + rng.normal(size=6)
    model = compile_model(spec, {"n": 6, "p": 3, "y": y.tolist(), "X": X.tolist()},
                          reparametrise=False)
    (conditional,) = model.conditionals
    assert not conditional.block.independent
    beta, gamma = np.array([0.9, 0.4, -0.6]), np.array([1.0, 0.0, 1.0])
    point = model.unconstrain({"beta": beta.tolist(), "gamma": gamma.tolist()})
    weights = conditional.element_log_weights(point, 1)
    direct = []
    for value in (0.0, 1.0):
        g = gamma.copy()
        g[1] = value
        direct.append(stats.norm.logpdf(y, X @ (g * beta), 1).sum()
                      + stats.bernoulli.logpmf(value, 0.3))
    assert np.allclose(weights - logsumexp(weights), np.array(direct) - logsumexp(direct),
                       atol=1e-12)


def test_integer_initial_values_must_be_whole_numbers_inside_the_bounds():
    model = compile_model(*change_point())
    with pytest.raises(InvalidSubmission) as raised:
        model.unconstrain({"early": 1.0, "late": 1.0, "change": 11})
    assert [p.pointer for p in raised.value.problems] == ["/change"]
    with pytest.raises(InvalidSubmission):
        model.unconstrain({"early": 1.0, "late": 1.0, "change": 3.5})


def test_an_integer_unknown_may_scale_a_continuous_distribution():
    """Held fixed during the continuous step, an integer needs no gradient as a scale."""
    spec, data = change_point()
    spec["likelihood"].append({"name": "size", "observed": "w", "distribution": "normal",
                               "arguments": {"location": "early", "scale": "change"}})
    spec["inputs"]["w"] = {"type": "real"}
    model = compile_model(spec, {**data, "w": 2.5})
    point = model.unconstrain({"early": 3.0, "late": 1.2, "change": 4})
    value, gradient = model.log_density_and_gradient(point)
    assert np.isfinite(value) and np.all(np.isfinite(gradient))
    with_scale = model.conditionals[0].log_weights(point)[:, 0]
    without = compile_model(*change_point()).conditionals[0].log_weights(point)[:, 0]
    scales = np.arange(2, 11)
    assert np.allclose(with_scale - without, stats.norm.logpdf(2.5, 3.0, scales), atol=1e-12)
