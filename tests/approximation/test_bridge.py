"""Bridge sampling against closed-form evidence, and the spec check for proper priors.

Closed forms (BDA3, Gelman et al. 2013, chapter 2):
- binomial y of n with p ~ beta(a, b): p(y) = C(n, y) B(a + y, b + n - y) / B(a, b);
- y_i ~ N(mu, sigma^2), sigma known, mu ~ N(m0, t0^2): marginally
  y ~ N(m0 1, sigma^2 I + t0^2 1 1^T) (scipy.stats.multivariate_normal gives its log density).
Posterior draws are exact (scipy / numpy), split into four "chains" of 1000, so the check is of
the evidence estimator alone. Methods: Meng & Wong (1996); Gronau et al. (2017).
"""

import numpy as np
import pytest
from scipy import special, stats

from worker.approximation.bridge import TooFewDraws, bayes_factor, bridge_sampling
from worker.approximation.propriety import improper_prior_problems
from worker.modeling import compile_model

BINOMIAL = {
    "inputs": {"n": {"type": "integer"}, "y": {"type": "integer", "lower": 0}},
    "unknowns": {"p": {"lower": 0, "upper": 1}},
    "priors": [{"on": "p", "distribution": "beta", "arguments": {"a": 2, "b": 3}}],
    "likelihood": [{"name": "successes", "observed": "y", "distribution": "binomial",
                    "arguments": {"trials": "n", "probability": "p"}}],
}


def unconstrained(model, name, values):
    return np.array([model.unconstrain({name: v}) for v in np.ravel(values)]).reshape(4, 1000, -1)


def test_beta_binomial_evidence():
    """y = 7 of n = 20 with a beta(2, 3) prior: within three of its own error estimates of the
    closed form, and that error estimate below 0.02 (4000 exact draws of a one-dimensional,
    nearly normal posterior on the log-odds scale)."""
    n, y, a, b = 20, 7, 2, 3
    model = compile_model(BINOMIAL, {"n": n, "y": y})
    rng = np.random.default_rng(1996)
    draws = unconstrained(model, "p", rng.beta(a + y, b + n - y, size=4000))
    result = bridge_sampling(model, draws, rng)
    exact = (np.log(special.comb(n, y)) + special.betaln(a + y, b + n - y) - special.betaln(a, b))
    assert result.relative_error < 0.02
    assert abs(result.log_evidence - exact) < 3 * result.relative_error
    assert result.warnings == []
    assert improper_prior_problems(BINOMIAL) == []


def normal_spec(with_effect: bool) -> dict:
    """y_i ~ N(mu + delta x_i, 1), mu and delta ~ N(0, 2^2); without the effect delta = 0."""
    location = "mu + delta * x" if with_effect else "mu"
    unknowns = {"mu": {}, "delta": {}} if with_effect else {"mu": {}}
    priors = [{"on": name, "distribution": "normal", "arguments": {"location": 0, "scale": 2}}
              for name in unknowns]
    return {
        "inputs": {"n": {"type": "integer"}, "x": {"type": "real", "shape": ["n"]},
                   "y": {"type": "real", "shape": ["n"]}},
        "unknowns": unknowns, "priors": priors,
        "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                        "arguments": {"location": location, "scale": 1}}],
    }


def exact_normal(design: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Closed-form log evidence and posterior (mean, covariance) of y ~ N(design beta, I),
    beta ~ N(0, 4 I) (BDA3 chapter 2; section 14.2 for the regression form)."""
    covariance = np.eye(y.size) + 4.0 * design @ design.T
    log_evidence = stats.multivariate_normal(np.zeros(y.size), covariance).logpdf(y)
    precision = design.T @ design + np.eye(design.shape[1]) / 4.0
    posterior_covariance = np.linalg.inv(precision)
    return log_evidence, posterior_covariance @ design.T @ y, posterior_covariance


def fit(with_effect, x, y, rng):
    design = np.column_stack([np.ones_like(x), x]) if with_effect else np.ones((x.size, 1))
    log_evidence, mean, covariance = exact_normal(design, y)
    model = compile_model(normal_spec(with_effect), {"n": y.size, "x": x.tolist(),
                                                     "y": y.tolist()})
    draws = rng.multivariate_normal(mean, covariance, size=4000).reshape(4, 1000, -1)
    return bridge_sampling(model, draws, rng), log_evidence


def test_normal_mean_with_known_variance_evidence():
    rng = np.random.default_rng(6)
    x = np.linspace(-1, 1, 25)
    y = rng.normal(0.5, 1.0, size=25)
    result, exact = fit(False, x, y, rng)
    assert abs(result.log_evidence - exact) < 3 * result.relative_error
    assert result.relative_error < 0.02


@pytest.mark.parametrize("effect", [0.0, 0.8])
def test_bayes_factor_of_nested_normal_models(effect):
    """With and without a slope on x (the smaller model is the larger with delta = 0): the log
    Bayes factor from two bridge estimates is within three of its error of the closed-form
    difference, and it favours the right model when the effect is there."""
    rng = np.random.default_rng(17)
    x = np.linspace(-1, 1, 30)
    y = 0.3 + effect * x + rng.normal(0, 1, size=30)
    larger, exact_larger = fit(True, x, y, rng)
    smaller, exact_smaller = fit(False, x, y, rng)
    factor = bayes_factor(larger, smaller)
    exact = exact_larger - exact_smaller
    assert abs(factor.log_bayes_factor - exact) < 3 * factor.error
    assert factor.error < 0.05
    if effect:
        assert factor.log_bayes_factor > 0


def test_too_few_draws():
    model = compile_model(normal_spec(True), {"n": 3, "x": [0, 1, 2], "y": [1, 2, 3]})
    rng = np.random.default_rng(0)
    with pytest.raises(TooFewDraws):
        bridge_sampling(model, rng.normal(size=(1, 4, 2)), rng)
    result = bridge_sampling(model, rng.normal(size=(2, 12, 2)) * 0.3 + [0.5, 1.0], rng)
    assert any("fewer than 10 per coordinate" in w for w in result.warnings)


def test_a_skewed_posterior_is_still_estimated_within_its_error():
    """A posterior that is a gamma(1, 4) rate (BDA3 section 2.6, counts 0, 0, 0 under an
    exponential(1) prior) is skewed on the log scale, far from the normal proposal; with 100
    draws per chain the estimate still lies within four of its stated errors of the closed form
    log(1/4) (the integral of exp(-rate) exp(-3 rate))."""
    spec = {
        "inputs": {"n": {"type": "integer"}, "y": {"type": "integer", "shape": ["n"], "lower": 0}},
        "unknowns": {"rate": {"lower": 0}},
        "priors": [{"on": "rate", "distribution": "exponential", "arguments": {"rate": 1}}],
        "likelihood": [{"name": "obs", "observed": "y", "distribution": "poisson",
                        "arguments": {"rate": "rate"}}],
    }
    model = compile_model(spec, {"n": 3, "y": [0, 0, 0]})
    rng = np.random.default_rng(3)
    draws = np.log(rng.gamma(1.0, 1 / 4, size=400)).reshape(4, 100, 1)
    result = bridge_sampling(model, draws, rng)
    exact = np.log(1 / 4)
    assert abs(result.log_evidence - exact) < 4 * result.relative_error


def test_improper_and_unnormalised_priors_are_named():
    spec = {
        "unknowns": {"a": {"flat_prior": True}, "b": {"lower": 0}, "c": {}, "d": {},
                     "e": {"lower": 0, "upper": 1}},
        "derived": {"d_squared": "d ^ 2"},
        "priors": [
            {"on": "b", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "c", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "c", "distribution": "normal", "arguments": {"location": 1, "scale": 1}},
            {"on": "d_squared", "distribution": "exponential", "arguments": {"rate": 1}},
            {"on": "e", "distribution": "uniform", "arguments": {"lower": 0, "upper": 1}},
        ],
        "likelihood": [],
    }
    problems = {p.pointer: p.message for p in improper_prior_problems(spec)}
    assert set(problems) == {"/model/unknowns/a/flat_prior", "/model/priors/0/distribution",
                             "/model/unknowns/c", "/model/priors/3/on"}
    assert "improper" in problems["/model/unknowns/a/flat_prior"]
    assert "truncated" in problems["/model/priors/0/distribution"]


def test_stored_constrained_draws_map_back_to_the_unconstrained_scale():
    """unconstrain_draws inverts report() on the unknowns' columns: a positive scale (log), a
    (0, 1) probability (log-odds) and a 3-simplex (two coordinates) at random points."""
    spec = {
        "unknowns": {"scale": {"lower": 0}, "p": {"lower": 0, "upper": 1},
                     "mix": {"shape": [3], "structure": "simplex"}, "free": {"shape": [2]}},
        "priors": [
            {"on": "scale", "distribution": "exponential", "arguments": {"rate": 1}},
            {"on": "p", "distribution": "beta", "arguments": {"a": 2, "b": 2}},
            {"on": "mix", "distribution": "dirichlet", "arguments": {"concentration": [1, 1, 1]}},
            {"on": "free", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        ],
        "likelihood": [],
    }
    model = compile_model(spec, {})
    rng = np.random.default_rng(4)
    u = rng.normal(size=(20, model.dimension))
    rows = np.array([model.report(point, rng) for point in u])[:, :len(model.unknown_names)]
    assert np.allclose(model.unconstrain_draws(rows), u, atol=1e-10)
