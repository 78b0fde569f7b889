"""Laplace and grid jobs through the engine's in-process interface (worker.runner).

Reference: the normal mean with known variance (BDA3, Gelman et al. 2013, section 2.5), whose
posterior is N(mean, 1/precision) in closed form, and a beta posterior (section 2.4).
"""

import numpy as np
import pytest
from scipy import stats

from worker import runner
from worker.problems import InvalidSubmission

Y = [1.0, 2.0, 0.5, 1.5, 1.2, 0.3, 2.2, 1.7]
NORMAL_MEAN = {
    "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"mu": {}},
    "derived": {"twice": "2 * mu"},
    "priors": [{"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 10}}],
    "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "mu", "scale": 1}}],
}


def body(method, **sampler):
    return {"model": NORMAL_MEAN, "data": {"n": len(Y), "y": Y},
            "sampler": {"method": method, "seed": 12, **sampler}}


@pytest.mark.parametrize("method", ["laplace", "grid"])
def test_an_approximation_job_reports_the_closed_form(method):
    """Both methods are exact for this Gaussian posterior: the summary's mean of mu is within
    4 Monte Carlo standard errors of the closed form (4000 independent draws), the derived
    column is computed per draw, and the verdict passes."""
    out = runner.run_in_process(body(method))
    precision = 1 / 100 + len(Y)
    mean = sum(Y) / precision
    assert out["settings"]["chains"] == 1
    assert out["draws"].shape == (1, 1000, 2)
    record = {r["name"]: r for r in out["summary"]}
    assert abs(record["mu"]["mean"] - mean) < 4 * np.sqrt(1 / precision / 1000)
    assert np.allclose(out["draws"][0, :, 1], 2 * out["draws"][0, :, 0])
    assert out["verdict"]["passed"]
    assert out["adapted"][0]["method"] == method
    if method == "laplace":
        assert out["adapted"][0]["mode"][0] == pytest.approx(mean, rel=1e-8)
        assert out["verdict"]["assessment"] == "trustworthy"
    else:
        assert out["adapted"][0]["means"][0] == pytest.approx(mean, rel=1e-6)


def test_a_skewed_laplace_job_fails_its_check():
    """Poisson counts (0, 0, 0) with an exponential(1) prior: posterior gamma(1, 4) (BDA3
    section 2.6); k-hat is above 0.5 (see tests/approximation/test_laplace.py), so the verdict
    fails with the check pareto_k and the stored weights are the smoothed ones."""
    submission = {
        "model": {
            "inputs": {"n": {"type": "integer"},
                       "y": {"type": "integer", "shape": ["n"], "lower": 0}},
            "unknowns": {"rate": {"lower": 0}},
            "priors": [{"on": "rate", "distribution": "exponential", "arguments": {"rate": 1}}],
            "likelihood": [{"name": "obs", "observed": "y", "distribution": "poisson",
                            "arguments": {"rate": "rate"}}],
        },
        "data": {"n": 3, "y": [0, 0, 0]},
        "sampler": {"method": "laplace", "draws": 20_000, "seed": 1},
    }
    out = runner.run_in_process(submission)
    assert not out["verdict"]["passed"]
    assert out["verdict"]["failed_checks"][0]["check"] == "pareto_k"
    weights = np.exp(out["stats"][0]["log_weight"])
    assert weights.sum() == pytest.approx(1.0)
    weighted = float(np.sum(weights * out["draws"][0, :, 0]))
    assert abs(weighted - stats.gamma(1, scale=1 / 4).mean()) < 0.01


def test_a_grid_job_with_three_unknowns_is_refused():
    submission = body("grid")
    submission["model"] = {
        "unknowns": {"a": {}, "b": {}, "c": {}},
        "priors": [{"on": k, "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
                   for k in "abc"],
        "likelihood": [],
    }
    submission["data"] = {}
    problems = runner.check_submission(submission)
    assert [p.pointer for p in problems] == ["/sampler/method"]
    assert "this model has 3" in problems[0].message
    with pytest.raises(InvalidSubmission):
        runner.run_in_process(submission)


def test_approximation_jobs_run_once():
    problems = runner.check_submission(body("laplace", chains=4))
    assert [p.pointer for p in problems] == ["/sampler/chains"]
