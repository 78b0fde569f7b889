"""Every distribution of the spec, used in a likelihood term whose arguments are expressions of
unknowns, compiles, and its gradient agrees with central finite differences (scipy.optimize.
approx_fprime). Each term is also checked against its scipy.stats log density or mass where scipy
has one, at a point of the unconstrained space.
"""

import numpy as np
import pytest
from scipy import special, stats

from worker.modeling import compile_model

from .central_differences import assert_gradient_close, central_gradient

# unknowns available to every case: p1, p2 unbounded; q1, q2 positive (x = exp(u))
UNKNOWNS = {"p1": {}, "p2": {}, "q1": {"lower": 0}, "q2": {"lower": 0}}
PRIORS = [{"on": name, "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
          for name in ("p1", "p2")] + [
    {"on": name, "distribution": "half_normal", "arguments": {"scale": 2}} for name in ("q1", "q2")]


def _values(u):
    return u[0], u[1], np.exp(u[2]), np.exp(u[3])


# name -> (arguments, observed data, input type, scipy log density given (p1, p2, q1, q2) or None)
CASES = {
    "normal": ({"location": "p1", "scale": "q1"}, [0.3, -1.2, 2.0], "real",
               lambda y, p1, p2, q1, q2: stats.norm.logpdf(y, p1, q1)),
    "cauchy": ({"location": "p1", "scale": "q1"}, [0.3, -1.2, 2.0], "real",
               lambda y, p1, p2, q1, q2: stats.cauchy.logpdf(y, p1, q1)),
    "laplace": ({"location": "p1", "scale": "q1 + 0.1"}, [0.3, -1.2, 2.0], "real",
                lambda y, p1, p2, q1, q2: stats.laplace.logpdf(y, p1, q1 + 0.1)),
    "logistic": ({"location": "p1", "scale": "q1"}, [0.3, -1.2, 2.0], "real",
                 lambda y, p1, p2, q1, q2: stats.logistic.logpdf(y, p1, q1)),
    "student_t": ({"degrees_of_freedom": "q2 + 1", "location": "p1", "scale": "q1"},
                  [0.3, -1.2, 2.0], "real",
                  lambda y, p1, p2, q1, q2: stats.t.logpdf(y, q2 + 1, p1, q1)),
    "lognormal": ({"log_location": "p1", "log_scale": "q1"}, [0.3, 1.2, 2.0], "real",
                  lambda y, p1, p2, q1, q2: stats.lognorm.logpdf(y, q1, scale=np.exp(p1))),
    "exponential": ({"rate": "q1"}, [0.3, 1.2, 2.0], "real",
                    lambda y, p1, p2, q1, q2: stats.expon.logpdf(y, scale=1 / q1)),
    "gamma": ({"shape": "q1 + 0.5", "rate": "q2"}, [0.3, 1.2, 2.0], "real",
              lambda y, p1, p2, q1, q2: stats.gamma.logpdf(y, q1 + 0.5, scale=1 / q2)),
    "inverse_gamma": ({"shape": "q1 + 0.5", "scale": "q2"}, [0.3, 1.2, 2.0], "real",
                      lambda y, p1, p2, q1, q2: stats.invgamma.logpdf(y, q1 + 0.5, scale=q2)),
    "weibull": ({"shape": "q1 + 0.5", "scale": "q2"}, [0.3, 1.2, 2.0], "real",
                lambda y, p1, p2, q1, q2: stats.weibull_min.logpdf(y, q1 + 0.5, scale=q2)),
    "beta": ({"a": "q1", "b": "q2"}, [0.3, 0.6, 0.9], "real",
             lambda y, p1, p2, q1, q2: stats.beta.logpdf(y, q1, q2)),
    "uniform": ({"lower": "p1 - 5", "upper": "p1 + 5"}, [0.3, -1.2, 2.0], "real",
                lambda y, p1, p2, q1, q2: stats.uniform.logpdf(y, p1 - 5, 10)),
    "half_normal": ({"scale": "q1"}, [0.3, 1.2, 2.0], "real",
                    lambda y, p1, p2, q1, q2: stats.halfnorm.logpdf(y, scale=q1)),
    "half_cauchy": ({"scale": "q1"}, [0.3, 1.2, 2.0], "real",
                    lambda y, p1, p2, q1, q2: stats.halfcauchy.logpdf(y, scale=q1)),
    # a half distribution is twice the symmetric one on y >= 0 (common practice)
    "half_student_t": ({"degrees_of_freedom": "q2 + 1", "scale": "q1"}, [0.3, 1.2, 2.0], "real",
                       lambda y, p1, p2, q1, q2: np.log(2) + stats.t.logpdf(y, q2 + 1, 0, q1)),
    "bernoulli": ({"log_odds": "p1 + p2"}, [0, 1, 1], "integer",
                  lambda y, p1, p2, q1, q2: stats.bernoulli.logpmf(y, special.expit(p1 + p2))),
    "binomial": ({"trials": 5, "log_odds": "p1"}, [0, 3, 5], "integer",
                 lambda y, p1, p2, q1, q2: stats.binom.logpmf(y, 5, special.expit(p1))),
    "poisson": ({"rate": "q1"}, [0, 3, 5], "integer",
                lambda y, p1, p2, q1, q2: stats.poisson.logpmf(y, q1)),
    # scipy's nbinom(n, p) has mean n(1 - p)/p: n = dispersion, p = dispersion/(dispersion + mean)
    # gives the mean and variance mean + mean^2/dispersion (standard algebra, common practice)
    "negative_binomial": ({"mean": "q1", "dispersion": "q2"}, [0, 3, 5], "integer",
                          lambda y, p1, p2, q1, q2: stats.nbinom.logpmf(
                              y, q2, q2 / (q2 + q1))),
    "categorical": ({"log_weights": "[p1, p2, 0]"}, [1, 3, 2], "integer",
                    lambda y, p1, p2, q1, q2: (np.array([p1, p2, 0.0])
                                               - special.logsumexp([p1, p2, 0.0]))[y - 1]),
    "cumulative_logit": ({"predictor": "p1", "cutpoints": "[-q1, q2]"}, [1, 2, 3], "integer",
                         None),
    "gumbel": ({"location": "p1", "scale": "q1"}, [0.3, -1.2, 2.0], "real",
               lambda y, p1, p2, q1, q2: stats.gumbel_r.logpdf(y, p1, q1)),
    # an unknown skew, both signs reached by p2
    "skew_normal": ({"location": "p1", "scale": "q1", "shape": "3 * p2"}, [0.3, -1.2, 2.0],
                    "real", lambda y, p1, p2, q1, q2: stats.skewnorm.logpdf(y, 3 * p2, p1, q1)),
    "beta_binomial": ({"trials": 6, "a": "q1", "b": "q2 + 0.5"}, [0, 3, 6], "integer",
                      lambda y, p1, p2, q1, q2: stats.betabinom.logpmf(y, 6, q1, q2 + 0.5)),
    # pi at zero plus (1 - pi) Poisson (Lambert 1992), from scipy.stats.poisson
    "zero_inflated_poisson": ({"zero_probability": "logistic(p1)", "rate": "q1"}, [0, 3, 0],
                              "integer", lambda y, p1, p2, q1, q2: np.log(
                                  np.where(y == 0, special.expit(p1), 0.0)
                                  + (1 - special.expit(p1)) * stats.poisson.pmf(y, q1))),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_distribution_in_a_likelihood_term(name):
    arguments, observed, kind, reference = CASES[name]
    spec = {
        "inputs": {"y": {"type": kind, "shape": [3]}},
        "unknowns": UNKNOWNS,
        "priors": PRIORS,
        "likelihood": [{"name": "obs", "observed": "y", "distribution": name,
                        "arguments": arguments}],
        "per_draw": {"replicates": ["obs"], "pointwise": ["obs"]},
    }
    model = compile_model(spec, {"y": observed})
    prior_only = compile_model({**spec, "likelihood": [], "per_draw": {}, "inputs": {}}, {})
    rng = np.random.default_rng(3)
    for _ in range(3):
        u = rng.normal(0.0, 0.5, model.dimension)
        value, gradient = model.log_density_and_gradient(u)
        assert np.isfinite(value)
        assert_gradient_close(gradient, central_gradient(model.log_density, u), scale=abs(value))
        if reference is not None:
            expected = np.sum(reference(np.array(observed), *_values(u)))
            assert value - prior_only.log_density(u) == pytest.approx(expected, rel=1e-9)
        row = model.report(u, rng)
        assert row.shape == (len(model.quantity_names),) and np.all(np.isfinite(row))


def test_dirichlet_and_multivariate_normal_priors_with_expression_arguments():
    spec = {
        "unknowns": {"w": {"shape": [3], "structure": "simplex"}, "c": {"lower": 0},
                     "x": {"shape": [2]}, "m": {},
                     "L": {"shape": [2, 2], "structure": "correlation_factor"}},
        "priors": [
            {"on": "c", "distribution": "exponential", "arguments": {"rate": 1}},
            {"on": "w", "distribution": "dirichlet", "arguments": {"concentration": "[c, c, 1]"}},
            {"on": "m", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
            {"on": "L", "distribution": "lkj_correlation_factor",
             "arguments": {"concentration": 2}},
            {"on": "x", "distribution": "multivariate_normal",
             "arguments": {"location": "[m, -m]", "covariance_cholesky": "L"}},
        ],
    }
    model = compile_model(spec, {})
    rng = np.random.default_rng(5)
    for _ in range(3):
        u = rng.normal(0.0, 0.5, model.dimension)
        value, gradient = model.log_density_and_gradient(u)
        assert np.isfinite(value)
        assert_gradient_close(gradient, central_gradient(model.log_density, u), scale=abs(value))


@pytest.mark.parametrize("name", sorted(CASES))
def test_distribution_as_a_prediction(name):
    """A prediction per draw with each distribution: a scalar draw when the arguments are scalars
    or carry only their own event axes (a categorical's weights, ordered cutpoints)."""
    arguments = CASES[name][0]
    spec = {"unknowns": UNKNOWNS, "priors": PRIORS,
            "per_draw": {"predictions": [{"name": "draw", "distribution": name,
                                           "arguments": arguments}]}}
    model = compile_model(spec, {})
    assert model.quantity_names[-1] == "draw"
    rng = np.random.default_rng(9)
    draws = np.array([model.report(np.zeros(model.dimension), rng)[-1] for _ in range(200)])
    assert np.all(np.isfinite(draws))
    if CASES[name][2] == "integer":
        assert np.all(draws == np.round(draws))
