"""Priors on derived quantities (issue 11 item 5).

A prior on d = f(x) multiplies the density by p_d(f(x)); d has the stated distribution only when
the Jacobian |df/dx| is included too (change of variables; Gelman et al. 2013, BDA3, section 1.8).
The engine refuses such a prior where f is nonlinear unless the prior says the omission is meant
(`jacobian_omitted_on_purpose: true`); an affine f has a constant Jacobian and passes.

The closed forms: for y_1..y_n ~ normal(mu, sigma) with p(mu, sigma) ∝ 1/sigma the marginal
posterior of mu is Student-t with n - 1 degrees of freedom, location ybar and scale s/sqrt(n)
(BDA3 section 3.2, from memory); with p(mu, sigma) ∝ 1 (flat in sigma) integrating sigma out of
sigma^-n exp(-((n-1)s^2 + n(mu - ybar)^2) / (2 sigma^2)) leaves
[(n-1)s^2 + n(mu - ybar)^2]^(-(n-1)/2), a Student-t with n - 2 degrees of freedom and scale
s sqrt((n-1) / (n(n-2))) (the same integral, worked here). Data: the 21 stack-loss values of
Brownlee (1965), shipped by statsmodels (statsmodels.datasets.stackloss).
"""

import copy

import numpy as np
import pytest
from scipy import integrate, stats
from statsmodels.datasets import stackloss

from worker.modeling import check_model, compile_model

BASE = {
    "unknowns": {"mu": {}, "log_sigma": {}, "nu": {}},
    "derived": {},
    "priors": [{"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
               {"on": "nu", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
               {"on": "log_sigma", "distribution": "normal",
                "arguments": {"location": 0, "scale": 1}}],
}


def _with_derived_prior(expression, **flag):
    spec = copy.deepcopy(BASE)
    spec["derived"]["d"] = expression
    spec["priors"].append({"on": "d", "distribution": "normal",
                           "arguments": {"location": 0, "scale": 3}, **flag})
    return spec


@pytest.mark.parametrize("expression", [
    "exp(log_sigma)", "mu * nu", "mu ^ 2", "1 / mu", "dot([mu, nu], [mu, 1])", "sqrt(square(mu))",
    "select(mu > 0, mu, nu)", "2 * exp(log_sigma) + 1", "log(softplus(mu))",
])
def test_nonlinear_derived_prior_is_refused_at_its_pointer(expression):
    problems = check_model(_with_derived_prior(expression), {})
    assert [p.pointer for p in problems] == ["/model/priors/3/on"], problems
    message = problems[0].message
    assert "nonlinear function of the unknowns" in message
    assert "Jacobian" in message and "jacobian_omitted_on_purpose: true" in message


@pytest.mark.parametrize("expression", [
    "exp(log_sigma)", "mu * nu", "select(mu > 0, mu, nu)",
])
def test_nonlinear_derived_prior_with_the_flag_is_taken_as_written(expression):
    spec = _with_derived_prior(expression, jacobian_omitted_on_purpose=True)
    model = compile_model(spec, {})
    without = compile_model(BASE, {})
    u = np.array([0.3, -0.4, 0.8])
    values = dict(zip(["mu", "log_sigma", "nu"], u, strict=True))
    d = {"exp(log_sigma)": np.exp(values["log_sigma"]), "mu * nu": values["mu"] * values["nu"],
         "select(mu > 0, mu, nu)": values["mu"]}[expression]
    assert model.log_density(u) - without.log_density(u) == pytest.approx(
        stats.norm.logpdf(d, 0, 3), rel=1e-12)


@pytest.mark.parametrize("expression", [
    "2 * mu + 1", "mu - nu", "(mu + nu) / 4", "-mu", "sum([mu, nu, log_sigma])",
    "[[1, 2], [0, 1]] @ [mu, nu]", "mean([mu, 2 * nu])", "dot([mu, nu], [3, 4])",
    "select(1 > 0, mu, nu)",
])
def test_affine_derived_prior_passes_without_the_flag(expression):
    assert check_model(_with_derived_prior(expression), {}) == []


def test_the_flag_must_be_true_or_false():
    spec = _with_derived_prior("exp(log_sigma)", jacobian_omitted_on_purpose="yes")
    problems = check_model(spec, {})
    assert [p.pointer for p in problems] == ["/model/priors/3/jacobian_omitted_on_purpose"]


def test_derived_prior_through_a_chain_of_derived_quantities_is_judged_as_a_whole():
    spec = copy.deepcopy(BASE)
    spec["derived"] = {"s": "exp(log_sigma)", "twice": "2 * s", "shifted": "mu + 1"}
    spec["priors"].append({"on": "twice", "distribution": "normal",
                           "arguments": {"location": 0, "scale": 3}})
    spec["priors"].append({"on": "shifted", "distribution": "normal",
                           "arguments": {"location": 0, "scale": 3}})
    assert [p.pointer for p in check_model(spec, {})] == ["/model/priors/3/on"]


# ---- the documented noninformative priors, against closed forms by quadrature

def _stackloss() -> np.ndarray:
    return stackloss.load_pandas().endog.to_numpy(dtype=float)


NORMAL_LIKELIHOOD = [{"name": "obs", "observed": "y", "distribution": "normal",
                      "arguments": {"location": "mu", "scale": "sigma"}}]
INPUTS = {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}}
# p(sigma) ∝ 1/sigma: flat on log sigma (docs/model-spec.md, "Noninformative priors")
INVERSE_SCALE_SPEC = {
    "inputs": INPUTS,
    "unknowns": {"mu": {"flat_prior": True}, "log_sigma": {"flat_prior": True}},
    "derived": {"sigma": "exp(log_sigma)"},
    "likelihood": NORMAL_LIKELIHOOD,
}
# p(sigma) ∝ 1: flat in sigma itself
FLAT_SCALE_SPEC = {
    "inputs": INPUTS,
    "unknowns": {"mu": {"flat_prior": True}, "sigma": {"lower": 0, "flat_prior": True}},
    "likelihood": NORMAL_LIKELIHOOD,
}


def closed_form_mu(y: np.ndarray, inverse_scale: bool):
    """The marginal posterior of mu (module docstring) as a frozen scipy distribution."""
    n, ybar, s = len(y), y.mean(), y.std(ddof=1)
    if inverse_scale:
        return stats.t(n - 1, ybar, s / np.sqrt(n))
    return stats.t(n - 2, ybar, s * np.sqrt((n - 1) / (n * (n - 2))))


@pytest.mark.parametrize("inverse_scale", [True, False])
def test_marginal_posterior_of_mu_by_quadrature(inverse_scale):
    """The compiled density (on the unconstrained space, log-Jacobians included) integrated over
    the scale's unconstrained coordinate with scipy.integrate.quad, normalised over mu, against
    the Student-t density; and the other prior's t is far off, so the test tells them apart."""
    y = _stackloss()
    spec = INVERSE_SCALE_SPEC if inverse_scale else FLAT_SCALE_SPEC
    model = compile_model(spec, {"n": len(y), "y": y.tolist()})
    peak = model.log_density(np.array([y.mean(), np.log(y.std())]))

    def marginal(mu: float) -> float:
        return integrate.quad(lambda v: np.exp(model.log_density(np.array([mu, v])) - peak),
                              -5.0, 10.0, epsabs=0, epsrel=1e-10, limit=200)[0]

    grid = np.linspace(y.mean() - 12.0, y.mean() + 12.0, 25)
    density = np.array([marginal(m) for m in grid])
    truth = closed_form_mu(y, inverse_scale)
    other = closed_form_mu(y, not inverse_scale)
    # normalising constant from the ratio at the centre; then every point must agree
    scale = truth.pdf(grid[12]) / density[12]
    np.testing.assert_allclose(density * scale, truth.pdf(grid), rtol=1e-6)
    assert np.max(np.abs(density * scale / other.pdf(grid) - 1.0)) > 0.05
