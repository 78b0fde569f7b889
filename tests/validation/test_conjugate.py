"""Conjugate posteriors with closed forms, through the whole engine (spec -> runner -> summary).

Source: Gelman, Carlin, Stern, Dunson, Vehtari & Rubin (2013), Bayesian Data Analysis, 3rd ed.
(BDA3), chapter 2 (binomial data with a beta prior: Beta(a + y, b + n - y); normal mean with known
variance: precision-weighted mean; Poisson data with a gamma prior: Gamma(a + sum y, b + n)) and
chapter 3 (multinomial / categorical data with a Dirichlet prior: Dirichlet(alpha + counts), whose
margins are Beta(alpha_k + c_k, sum(alpha + c) - alpha_k - c_k)). Reference values from
scipy.stats. Posterior mean, sd and 5/50/95% quantiles must lie within 4 MCSE (our MCSE,
Vehtari et al. 2021) of the closed form, for NUTS, static HMC and Metropolis. The data are
invented with fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.validation.agreement import METHODS, from_scipy, mismatches, record_of, run


def _normal_mean() -> tuple[dict, dict, dict]:
    rng = np.random.default_rng(101)
    sigma, prior_location, prior_scale = 2.0, 1.0, 3.0
    y = np.round(rng.normal(1.5, sigma, size=20), 3)
    spec = {
        "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
        "unknowns": {"mu": {}},
        "priors": [{"on": "mu", "distribution": "normal",
                    "arguments": {"location": prior_location, "scale": prior_scale}}],
        "likelihood": [{"name": "y_given_mu", "observed": "y", "distribution": "normal",
                        "arguments": {"location": "mu", "scale": sigma}}],
    }  # fmt: skip
    precision = 1 / prior_scale**2 + y.size / sigma**2
    mean = (prior_location / prior_scale**2 + y.sum() / sigma**2) / precision
    truth = {"mu": stats.norm(mean, 1 / np.sqrt(precision))}
    return spec, {"n": y.size, "y": y.tolist()}, truth


def _beta_binomial() -> tuple[dict, dict, dict]:
    a, b, trials, successes = 2.0, 3.0, 50, 17
    spec = {
        "inputs": {"trials": {"type": "integer", "lower": 0},
                   "successes": {"type": "integer", "lower": 0}},
        "unknowns": {"theta": {"lower": 0, "upper": 1}},
        "priors": [{"on": "theta", "distribution": "beta", "arguments": {"a": a, "b": b}}],
        "likelihood": [{"name": "count", "observed": "successes", "distribution": "binomial",
                        "arguments": {"trials": "trials", "probability": "theta"}}],
    }  # fmt: skip
    truth = {"theta": stats.beta(a + successes, b + trials - successes)}
    return spec, {"trials": trials, "successes": successes}, truth


def _gamma_poisson() -> tuple[dict, dict, dict]:
    rng = np.random.default_rng(202)
    shape, rate = 3.0, 0.5
    counts = rng.poisson(4.0, size=15)
    spec = {
        "inputs": {"n": {"type": "integer"},
                   "counts": {"type": "integer", "shape": ["n"], "lower": 0}},
        "unknowns": {"rate": {"lower": 0}},
        "priors": [{"on": "rate", "distribution": "gamma",
                    "arguments": {"shape": shape, "rate": rate}}],
        "likelihood": [{"name": "events", "observed": "counts", "distribution": "poisson",
                        "arguments": {"rate": "rate"}}],
    }  # fmt: skip
    truth = {"rate": stats.gamma(shape + counts.sum(), scale=1 / (rate + counts.size))}
    return spec, {"n": counts.size, "counts": counts.tolist()}, truth


def _dirichlet_categorical() -> tuple[dict, dict, dict]:
    rng = np.random.default_rng(303)
    alpha = np.array([1.0, 2.0, 3.0, 1.5])
    outcomes = rng.choice(4, size=40, p=[0.1, 0.2, 0.5, 0.2]) + 1  # 1-based categories
    spec = {
        "inputs": {"n": {"type": "integer"},
                   "outcome": {"type": "integer", "shape": ["n"], "lower": 1, "upper": 4}},
        "unknowns": {"p": {"shape": [4], "structure": "simplex"}},
        "priors": [{"on": "p", "distribution": "dirichlet",
                    "arguments": {"concentration": alpha.tolist()}}],
        "likelihood": [{"name": "choice", "observed": "outcome", "distribution": "categorical",
                        "arguments": {"log_weights": "log(p)"}}],
    }  # fmt: skip
    posterior = alpha + np.bincount(outcomes - 1, minlength=4)
    truth = {
        f"p[{k + 1}]": stats.beta(posterior[k], posterior.sum() - posterior[k]) for k in range(4)
    }
    return spec, {"n": outcomes.size, "outcome": outcomes.tolist()}, truth


CASES = {
    "normal_mean": _normal_mean,
    "beta_binomial": _beta_binomial,
    "gamma_poisson": _gamma_poisson,
    "dirichlet_categorical": _dirichlet_categorical,
}


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("case", sorted(CASES))
def test_conjugate_posterior_matches_closed_form(case: str, method: str) -> None:
    spec, data, truth = CASES[case]()
    outcome = run(spec, data, method, seed=sum(map(ord, case + method)))
    problems = []
    for name, distribution in truth.items():
        problems += mismatches(record_of(outcome, name), from_scipy(distribution))
    assert not problems, problems
    # an easy posterior with these budgets should also pass the default quality verdict
    assert outcome["verdict"]["passed"], outcome["verdict"]["failed_checks"]


def test_the_comparison_has_power() -> None:
    """The 4-MCSE check must flag a reference off by a quarter of a posterior sd: with the
    verdict's ESS of at least 400, 4 MCSE of the mean is at most 4 sd / sqrt(400) = 0.2 sd
    (beta-binomial posterior, NUTS)."""
    spec, data, truth = _beta_binomial()
    outcome = run(spec, data, "nuts", seed=5)
    assert outcome["verdict"]["passed"]
    reference = from_scipy(truth["theta"])
    assert not mismatches(record_of(outcome, "theta"), reference)
    shifted = {"mean": reference["mean"] + 0.25 * reference["sd"]}
    assert mismatches(record_of(outcome, "theta"), shifted)
