"""Warm starts on conjugate models: a nightly refit started from yesterday's fit is still right.

Day 1's data are fitted cold; day 2's data (day 1's plus a new day, so the posterior has moved and
narrowed) are fitted with a warm start from day 1's adapted records and a quarter of the cold
warm-up. The day-2 posterior mean, sd and 5/50/95% quantiles must lie within 4 MCSE of the closed
form, and the default verdict must pass. Closed forms: Gelman et al. (2013), Bayesian Data
Analysis, 3rd ed. (BDA3), chapter 2 (normal mean with known variance: precision-weighted mean;
Poisson data with a gamma prior: Gamma(a + sum y, b + n)); reference values from scipy.stats.
A record whose step size (or proposal scale) is 100 times too large or too small must end just
as right: a warm start is a start, not a fixed setting. The data are invented with fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.validation.agreement import BUDGETS, METHODS, from_scipy, mismatches, record_of, run
from worker import runner

SIGMA, PRIOR_LOCATION, PRIOR_SCALE = 2.0, 1.0, 3.0
SHAPE, RATE = 3.0, 0.5


def _normal_days() -> tuple[dict, dict, dict, list[dict]]:
    rng = np.random.default_rng(404)
    day_1 = np.round(rng.normal(1.5, SIGMA, size=20), 3)
    day_2 = np.concatenate([day_1, np.round(rng.normal(2.5, SIGMA, size=20), 3)])
    spec = {
        "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
        "unknowns": {"mu": {}},
        "priors": [{"on": "mu", "distribution": "normal",
                    "arguments": {"location": PRIOR_LOCATION, "scale": PRIOR_SCALE}}],
        "likelihood": [{"name": "y_given_mu", "observed": "y", "distribution": "normal",
                        "arguments": {"location": "mu", "scale": SIGMA}}],
    }  # fmt: skip
    data = [{"n": y.size, "y": y.tolist()} for y in (day_1, day_2)]
    return spec, data[0], data[1], [_normal_posterior(y) for y in (day_1, day_2)]


def _normal_posterior(y: np.ndarray) -> dict:
    precision = 1 / PRIOR_SCALE**2 + y.size / SIGMA**2
    mean = (PRIOR_LOCATION / PRIOR_SCALE**2 + y.sum() / SIGMA**2) / precision
    return {"mu": stats.norm(mean, 1 / np.sqrt(precision))}


def _gamma_poisson_days() -> tuple[dict, dict, dict, list[dict]]:
    rng = np.random.default_rng(505)
    day_1 = rng.poisson(4.0, size=12)
    day_2 = np.concatenate([day_1, rng.poisson(6.0, size=12)])
    spec = {
        "inputs": {"n": {"type": "integer"},
                   "counts": {"type": "integer", "shape": ["n"], "lower": 0}},
        "unknowns": {"rate": {"lower": 0}},
        "priors": [{"on": "rate", "distribution": "gamma",
                    "arguments": {"shape": SHAPE, "rate": RATE}}],
        "likelihood": [{"name": "events", "observed": "counts", "distribution": "poisson",
                        "arguments": {"rate": "rate"}}],
    }  # fmt: skip
    data = [{"n": y.size, "counts": y.tolist()} for y in (day_1, day_2)]
    truths = [
        {"rate": stats.gamma(SHAPE + y.sum(), scale=1 / (RATE + y.size))} for y in (day_1, day_2)
    ]
    return spec, data[0], data[1], truths


CASES = {"normal mean": _normal_days, "gamma-poisson": _gamma_poisson_days}


def _warm_refit(case: str, method: str, spoil: float = 1.0) -> dict:
    spec, day_1, day_2, _ = CASES[case]()
    earlier = run(spec, day_1, method, seed=11)
    member = runner.warm_start_from(earlier, job="day-1")
    for record in member["chains"]:
        if method == "metropolis":
            record["proposal_scale"] *= spoil
        else:
            record["step_size"] *= spoil
    warmup = BUDGETS[method]["warmup_iterations"] // 4
    body = {
        "model": spec,
        "data": day_2,
        "sampler": {"method": method, "seed": 12, **BUDGETS[method], "warmup_iterations": warmup},
        "warm_start": member,
        # mismatches() reads the 5/50/95% quantiles from a 90% central interval
        "summary": {"interval": 0.9},
    }
    return runner.run_in_process(body)


@pytest.mark.slow
@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("case", sorted(CASES))
def test_a_warm_refit_matches_the_closed_form(case: str, method: str) -> None:
    day_1_truth, truth = CASES[case]()[3]
    outcome = _warm_refit(case, method)
    assert outcome["settings"]["warmup_iterations"] == BUDGETS[method]["warmup_iterations"] // 4
    found = []
    for name, distribution in truth.items():
        found += mismatches(record_of(outcome, name), from_scipy(distribution))
    assert not found, found
    assert outcome["verdict"]["passed"], outcome["verdict"]["failed_checks"]
    # the comparison has power: day 1's posterior, where the records came from, is far off
    for name, distribution in day_1_truth.items():
        assert mismatches(record_of(outcome, name), {"mean": float(distribution.mean())})


@pytest.mark.slow
@pytest.mark.parametrize("spoil", [100.0, 0.01])
@pytest.mark.parametrize("method", METHODS)
def test_a_bad_record_is_adapted_away(method: str, spoil: float) -> None:
    truth = CASES["normal mean"]()[3][1]
    outcome = _warm_refit("normal mean", method, spoil=spoil)
    found = mismatches(record_of(outcome, "mu"), from_scipy(truth["mu"]))
    assert not found, found
    assert outcome["verdict"]["passed"], outcome["verdict"]["failed_checks"]
