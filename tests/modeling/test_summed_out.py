"""Integer unknowns summed out of the density (worker/modeling/summing.py).

References: the summed-out log density must equal scipy.special.logsumexp of the joint log
density enumerated over every assignment of the integer unknown (the same model compiled
without the flag, whose joint tests/modeling/test_integer_unknowns.py checks against
scipy.stats term by term), and for the change-point and the mixture also a direct scipy.stats
computation of the marginal; gradients against scipy.optimize.approx_fprime (forward
differences). The per-draw values must follow the full conditional, the enumerated joint
normalised (Geman & Geman 1984), tested by scipy.stats.chisquare. Data are invented.
"""

from __future__ import annotations

import copy
import itertools

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import approx_fprime
from scipy.special import logsumexp

from tests.modeling.test_integer_unknowns import COUNTS, change_point, mixture
from worker.modeling import compile_model
from worker.problems import InvalidSubmission


def summed(spec: dict, name: str) -> dict:
    spec = copy.deepcopy(spec)
    spec["unknowns"][name]["summed_out"] = True
    return spec


def spike_and_slab() -> tuple[dict, dict]:
    """Each slope's prior scale picked by its own indicator: the elements are independent given
    the slopes, and the indicator's terms have a continuous variate (the slope)."""
    spec = {
        "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                        "arguments": {"location": "X @ slope", "scale": 1}}],
        "inputs": {"n": {"type": "integer"}, "p": {"type": "integer"},
                   "y": {"type": "real", "shape": ["n"]},
                   "X": {"type": "real", "shape": ["n", "p"]}},
        "unknowns": {"slope": {"shape": ["p"]},
                     "included": {"type": "integer", "shape": ["p"], "lower": 0, "upper": 1}},
        "priors": [
            {"on": "included", "distribution": "bernoulli", "arguments": {"probability": 0.4}},
            {"on": "slope", "distribution": "normal",
             "arguments": {"location": 0, "scale": "select(included == 1, 2.0, 0.1)"}},
        ],
    }
    rng = np.random.default_rng(11)
    X = rng.normal(size=(8, 3))
    y = X @ np.array([1.0, 0.0, -0.4]) + rng.normal(size=8)
    return spec, {"n": 8, "p": 3, "y": y.round(3).tolist(), "X": X.round(3).tolist()}


def weighted_mixture() -> tuple[dict, dict]:
    """The mixture with unknown weights (a simplex) in the indicators' prior: the prior's
    vector argument log(w) reaches the indicator's term from outside the sum."""
    spec, data = mixture()
    spec["unknowns"]["w"] = {"shape": [2], "structure": "simplex"}
    spec["priors"][2]["arguments"] = {"log_weights": "log(w)"}
    spec["priors"].append({"on": "w", "distribution": "dirichlet",
                           "arguments": {"concentration": [2, 2]}})
    return spec, data


MODELS = {"change point": (change_point, "change"), "mixture": (mixture, "z"),
          "spike and slab": (spike_and_slab, "included"),
          "weighted mixture": (weighted_mixture, "z")}


def enumerated(joint, u: np.ndarray, name: str, bounds: tuple[int, int],
               size: int) -> np.ndarray:
    """The joint log density at every assignment of the integer unknown."""
    values = range(bounds[0], bounds[1] + 1)
    return np.array([joint.log_density(np.concatenate([u, assignment]))
                     for assignment in itertools.product(values, repeat=size)])


@pytest.mark.parametrize("which", sorted(MODELS))
def test_summed_density_is_the_logsumexp_of_the_enumerated_joint(which: str):
    make, name = MODELS[which]
    spec, data = make()
    joint = compile_model(spec, data)
    model = compile_model(summed(spec, name), data)
    assert model.discrete_size == 0 and model.dimension == joint.dimension
    assert model.unknown_names == [n for n in joint.unknown_names
                                   if n not in joint.integer_quantities]
    (conditional,) = joint.conditionals
    block = conditional.block
    rng = np.random.default_rng(3)
    for _ in range(3):
        u = rng.normal(scale=0.7, size=model.dimension)
        reference = logsumexp(enumerated(joint, u, name, (block.lower, block.upper), block.size))
        value, gradient = model.log_density_and_gradient(u)
        assert value == pytest.approx(reference, rel=1e-11, abs=1e-10)
        assert model.log_density(u) == value
        # scipy.optimize.approx_fprime: forward differences, error of order the step
        numeric = approx_fprime(u, model.log_density, 1e-7)
        assert np.allclose(gradient, numeric, rtol=1e-4, atol=1e-4), (gradient, numeric)


def test_change_point_marginal_against_scipy_directly():
    spec, data = change_point()
    model = compile_model(summed(spec, "change"), data)
    early, late = 2.7, 1.3
    u = np.log([early, late])
    y, period = np.array(COUNTS), np.arange(1, len(COUNTS) + 1)
    # flat prior over change 2..n: no term; the rates' gamma(2, 1) priors and log-Jacobians
    joint = [stats.poisson.logpmf(y, np.where(period < c, early, late)).sum()
             for c in range(2, len(COUNTS) + 1)]
    expected = (logsumexp(joint) + stats.gamma.logpdf(early, 2) + stats.gamma.logpdf(late, 2)
                + u.sum())
    assert model.log_density(u) == pytest.approx(expected, rel=1e-12)


def test_mixture_marginal_against_scipy_directly():
    spec, data = mixture()
    model = compile_model(summed(spec, "z"), data)
    mu, noise = np.array([-1.1, 1.7]), 0.9
    u = np.array([*mu, np.log(noise)])
    y = np.array(data["y"])
    prior = np.array([0.3, -0.2]) - logsumexp([0.3, -0.2])
    rows = logsumexp(np.stack([prior[k] + stats.norm.logpdf(y, mu[k], noise) for k in (0, 1)]),
                     axis=0)
    expected = (rows.sum() + stats.norm.logpdf(mu, [-2, 2], 1).sum()
                + stats.halfnorm.logpdf(noise) + np.log(noise))
    assert model.log_density(u) == pytest.approx(expected, rel=1e-12)


def test_draws_follow_the_full_conditional():
    """Per-draw indicator values from report(): their frequencies against the normalised
    enumerated joint by scipy.stats.chisquare (at the 0.001 level: a wrong conditional, say one
    component's weights swapped, gives a statistic in the thousands)."""
    spec, data = change_point()
    joint = compile_model(spec, data)
    model = compile_model(summed(spec, "change"), data)
    assert model.quantity_names == ["early", "late", "change"]
    assert "change" in model.integer_quantities
    u = np.log([3.1, 1.2])
    weights = enumerated(joint, u, "change", (2, len(COUNTS)), 1)
    probability = np.exp(weights - logsumexp(weights))
    rng = np.random.default_rng(8)
    draws = np.array([model.report(u, rng)[2] for _ in range(4000)])
    assert np.all(draws == np.round(draws)) and draws.min() >= 2
    observed = np.array([np.sum(draws == c) for c in range(2, len(COUNTS) + 1)])
    keep = probability * draws.size >= 5  # chi-square's usual expected-count rule
    expected = np.append(probability[keep], probability[~keep].sum()) * draws.size
    counts = np.append(observed[keep], observed[~keep].sum())
    assert stats.chisquare(counts, expected).pvalue > 0.001
    # the same conditional a Gibbs step of the joint model weighs (worker/modeling/conditionals)
    (gibbs,) = joint.conditionals
    gibbs_weights = gibbs.log_weights(np.concatenate([u, [5.0]]))[:, 0]
    assert np.allclose(gibbs_weights - logsumexp(gibbs_weights), np.log(probability), atol=1e-12)


def test_mixture_rows_are_drawn_per_row():
    spec, data = mixture()
    model = compile_model(summed(spec, "z"), data)
    row = model.report(np.array([-2.0, 2.0, 0.0]), np.random.default_rng(1))
    indicators = row[3:]
    assert model.quantity_names[3:] == [f"z[{i}]" for i in range(1, 6)]
    assert set(indicators) <= {1.0, 2.0}
    # rows at -2.1 and 2.6 with locations -2 and 2 and noise 1: their components are near certain
    assert indicators[0] == 1.0 and indicators[4] == 2.0


def problems_of(spec: dict, data: dict) -> list:
    with pytest.raises(InvalidSubmission) as caught:
        compile_model(spec, data)
    return caught.value.problems


def test_coupled_indicators_cannot_be_summed_out():
    spec, data = spike_and_slab()
    spec["likelihood"][0]["arguments"]["location"] = "X @ (included * slope)"
    spec["priors"][1]["arguments"]["scale"] = 2
    (problem,) = problems_of(summed(spec, "included"), data)
    assert problem.pointer == "/model/unknowns/included/summed_out"
    assert "not conditionally independent" in problem.message


def test_a_term_shared_with_another_integer_unknown_is_refused():
    spec, data = change_point()
    spec["unknowns"]["second"] = {"type": "integer", "lower": 1, "upper": 3, "flat_prior": True}
    spec["likelihood"][0]["arguments"]["rate"] = "select(period < change, early, late) * second"
    (problem,) = problems_of(summed(spec, "change"), data)
    assert problem.pointer == "/model/unknowns/change/summed_out"
    assert "second" in problem.message


def test_too_large_a_support_is_refused():
    spec, data = change_point()
    data = {**data, "n": 1500, "y": [1] * 1500, "period": list(range(1, 1501))}
    (problem,) = problems_of(summed(spec, "change"), data)
    assert problem.pointer == "/model/unknowns/change/summed_out"
    assert "1499 possible values" in problem.message


def test_summing_out_a_continuous_unknown_or_everything_is_refused():
    spec, data = change_point()
    (problem,) = problems_of(summed(spec, "early"), data)
    assert problem.pointer == "/model/unknowns/early/summed_out"
    only = {"likelihood": [{"name": "obs", "observed": "y", "distribution": "poisson",
                            "arguments": {"rate": "select(period < change, 4.0, 1.0)"}}],
            "inputs": spec["inputs"],
            "unknowns": {"change": {"type": "integer", "lower": 2, "upper": "n",
                                    "flat_prior": True, "summed_out": True}}}
    (problem,) = problems_of(only, data)
    assert problem.pointer == "/model/unknowns/change/summed_out"


def test_categorical_gradient_with_per_row_log_weights():
    """Found by the weighted mixture above: with a log-weight row per element the categorical's
    gradient lost the +1 at the observed category when the log weights came in an array that is
    not C-ordered (a Fortran-ordered intermediate, whose reshape copied). Value against
    scipy.special.log_softmax, gradient against scipy.optimize.approx_fprime."""
    from scipy.special import log_softmax

    from worker.modeling.distributions import find_distribution

    d = find_distribution("categorical", {"log_weights"})
    x = np.array([1.0, 2.0, 2.0, 1.0, 2.0])
    rows = np.asfortranarray(np.random.default_rng(2).normal(size=(5, 2)))
    value, grads = d.log_density_and_gradients(x, {"log_weights": rows},
                                               frozenset({"log_weights"}))
    picked = x.astype(int) - 1
    assert np.allclose(value, log_softmax(rows, axis=1)[np.arange(5), picked], atol=1e-12)

    def total(flat: np.ndarray) -> float:
        return float(np.sum(d.log_density(x, {"log_weights": flat.reshape(5, 2)})))

    assert np.allclose(grads["log_weights"].ravel(), approx_fprime(rows.ravel(), total, 1e-7),
                       atol=1e-5)
