"""The compound sampler (Gibbs updates of integer unknowns, NUTS for the rest) against exact
posteriors computed by summing over every value of the discrete unknowns.

Every estimate is compared with its exact value in units of a batch-means standard error
(tests/samplers/batch_means.py). Posterior probabilities of discrete values must lie within 4
MCSE (TOLERANCE_MCSE). Standard deviations form a Bonferroni family at level 0.01
(tests/samplers/quantile_checks.py), and each test asserts its own power: the strongest sd check
must move by at least critical + 2.33 se under a 2 % error in the sd, so such an error is caught
with probability at least 0.99. With se(sd) ~ sd sqrt((kurtosis - 1) / (4 ESS)) (delta method,
common practice) that needs an effective sample size of about 36,000 for a near-normal
quantity (0.02 / 5.3 = 0.0038 = sqrt(1 / (2 ESS))); the runs below are sized for it and the
assertion measures it on the run itself.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import stats
from scipy.special import gammaln, logsumexp

from tests.samplers.batch_means import TOLERANCE_MCSE, batch_means_se
from tests.samplers.quantile_checks import Check, failures, power_shortfall, sd_check
from worker.runner import run_in_process

# Yearly counts of British coal-mining disasters (explosions killing ten or more), 1851-1962,
# the data of Jarrett (1979), A note on the intervals between coal-mining disasters,
# Biometrika 66, as analysed for a change-point by Carlin, Gelfand & Smith (1992), Hierarchical
# Bayesian analysis of changepoint problems, Applied Statistics 41. Typed in from memory, as is
# the check that they number 112 years and 191 disasters.
COAL_DISASTERS = [
    4, 5, 4, 1, 0, 4, 3, 4, 0, 6, 3, 3, 4, 0, 2, 6, 3, 3, 5, 4, 5, 3, 1, 4, 4, 1, 5, 5, 3, 4,
    2, 5, 2, 2, 3, 4, 2, 1, 3, 2, 2, 1, 1, 1, 1, 3, 0, 0, 1, 0, 1, 1, 0, 0, 3, 1, 0, 3, 2, 2,
    0, 1, 1, 1, 0, 1, 0, 1, 0, 0, 0, 2, 1, 0, 0, 0, 1, 1, 0, 2, 3, 3, 1, 1, 2, 1, 1, 1, 1, 2,
    4, 2, 0, 0, 0, 1, 4, 0, 0, 0, 1, 0, 0, 0, 0, 0, 1, 0, 0, 1, 0, 1,
]
FIRST_YEAR = 1851
RATE_SHAPE, RATE_RATE = 2.0, 1.0  # gamma(shape, rate) prior on each yearly rate
SMALLEST = 0.01  # years with at least this exact probability are checked one by one


def coal_body(chains: int, draws: int, seed: int) -> dict:
    """Rate `early` in the years before `change` (an index 2..112 into the years), `late` from
    it on; a uniform prior over the change year (flat_prior on a bounded integer)."""
    gamma = {"distribution": "gamma", "arguments": {"shape": RATE_SHAPE, "rate": RATE_RATE}}
    return {
        "model": {
            "likelihood": [{"name": "disasters", "observed": "y", "distribution": "poisson",
                            "arguments": {"rate": "select(year < change, early, late)"}}],
            "inputs": {"n": {"type": "integer"},
                       "y": {"type": "integer", "shape": ["n"], "lower": 0},
                       "year": {"type": "integer", "shape": ["n"]}},
            "unknowns": {"early": {"lower": 0}, "late": {"lower": 0},
                         "change": {"type": "integer", "lower": 2, "upper": "n",
                                    "flat_prior": True}},
            "priors": [{"on": "early", **gamma}, {"on": "late", **gamma}],
        },
        "data": {"n": len(COAL_DISASTERS), "y": COAL_DISASTERS,
                 "year": list(range(1, len(COAL_DISASTERS) + 1))},
        "sampler": {"chains": chains, "draws": draws, "warmup_iterations": 1000, "seed": seed},
    }


def exact_change_point() -> dict:
    """The exact posterior, by summing over every change index with both rates integrated out.

    Gamma-Poisson conjugacy (BDA3 section 2.6): with S counts over m years and a Gamma(a, b)
    prior, the marginal likelihood is b^a Gamma(a + S) / (Gamma(a) (b + m)^(a + S)) / prod y!,
    and the rate's posterior is Gamma(a + S, b + m). The change's posterior is proportional to
    the product over the two segments; the rates' posterior is the mixture over changes.
    """
    y = np.array(COAL_DISASTERS, dtype=float)
    a, b = RATE_SHAPE, RATE_RATE
    changes = np.arange(2, len(y) + 1)
    before = np.array([y[:c - 1].sum() for c in changes])
    m_before = changes - 1.0
    after, m_after = y.sum() - before, len(y) - m_before
    log_post = (gammaln(a + before) - (a + before) * np.log(b + m_before)
                + gammaln(a + after) - (a + after) * np.log(b + m_after))
    p = np.exp(log_post - logsumexp(log_post))
    out = {"changes": changes, "probability": p,
           "change_sd": float(np.sqrt(p @ changes**2 - (p @ changes) ** 2))}
    for name, shape, rate in (("early", a + before, b + m_before), ("late", a + after,
                                                                     b + m_after)):
        mean = p @ (shape / rate)
        second = p @ (shape / rate**2 + (shape / rate) ** 2)
        out[f"{name}_sd"] = float(np.sqrt(second - mean**2))
    return out


def test_the_coal_data_as_typed_number_112_years_and_191_disasters():
    assert len(COAL_DISASTERS) == 1962 - FIRST_YEAR + 1 == 112
    assert sum(COAL_DISASTERS) == 191


@pytest.mark.slow
def test_change_point_posterior_of_the_year_matches_the_exact_sum():
    """Each year's posterior probability of being the first at the late rate, within 4 MCSE of
    the exact one; the years below SMALLEST together as one probability. Then the sds of the
    change year and of both rates, with the power the module docstring describes."""
    exact = exact_change_point()
    result = run_in_process(coal_body(chains=4, draws=20_000, seed=20261203))
    names = result["names"]
    draws = result["draws"]
    change = draws[:, :, names.index("change")]
    assert np.all(change == np.round(change))
    wide = []
    checked = exact["probability"] >= SMALLEST
    for c, p in zip(exact["changes"][checked], exact["probability"][checked], strict=True):
        indicator = (change == c).astype(float)
        se = batch_means_se(indicator)
        if abs(indicator.mean() - p) > TOLERANCE_MCSE * se:
            wide.append(f"{FIRST_YEAR + c - 1}: {indicator.mean():.4f} vs {p:.4f} (se {se:.4f})")
    rest = (~np.isin(change, exact["changes"][checked])).astype(float)
    rest_p = float(exact["probability"][~checked].sum())
    if abs(rest.mean() - rest_p) > TOLERANCE_MCSE * batch_means_se(rest):
        wide.append(f"other years: {rest.mean():.4f} vs {rest_p:.4f}")
    assert not wide, wide
    checks: list[Check] = [
        sd_check("change", change, exact["change_sd"]),
        sd_check("early", draws[:, :, names.index("early")], exact["early_sd"]),
        sd_check("late", draws[:, :, names.index("late")], exact["late_sd"]),
    ]
    assert not failures(checks), failures(checks)
    assert power_shortfall(checks) is None, power_shortfall(checks)
    assert result["sampler"]["divergences"] == 0


# ---- a two-component normal mixture -----------------------------------------------------------

MIXTURE_ROWS = 10
COMPONENT_MEANS = np.array([-2.0, 2.0])  # prior means of the two component locations
COMPONENT_SCALE = 1.0  # prior sd of each location; the noise sd is 1 and known
LOG_WEIGHTS = np.array([0.3, -0.2])  # the categorical prior on each row's component
RARE = 0.002  # memberships rarer than this are checked together


def mixture_data() -> list[float]:
    """Ten rows drawn once (seeded) near the two prior means: invented test input whose
    reference is the enumeration below, not the values themselves. Apart enough that the
    locations mix well (batch means put the effective sample size at about half the draws, so
    4 chains of 20,000 give the power of the module docstring, measured: 17,000 fell just
    short, 5.10 se against 5.13, under the present warm-up), close enough
    that every row's membership is uncertain (posterior probabilities 0.0002 to 0.03 of the
    other component)."""
    rng = np.random.default_rng(16)
    return np.round(np.concatenate([rng.normal(-2.2, 0.6, 5), rng.normal(2.2, 0.6, 5)]),
                    3).tolist()


def mixture_body(chains: int, draws: int, seed: int) -> dict:
    return {
        "model": {
            "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                            "arguments": {"location": "mu[z]", "scale": 1}}],
            "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
            "unknowns": {"mu": {"shape": [2]},
                         "z": {"type": "integer", "shape": ["n"], "lower": 1, "upper": 2}},
            "priors": [
                {"on": "mu", "distribution": "normal",
                 "arguments": {"location": COMPONENT_MEANS.tolist(), "scale": COMPONENT_SCALE}},
                {"on": "z", "distribution": "categorical",
                 "arguments": {"log_weights": LOG_WEIGHTS.tolist()}},
            ],
        },
        "data": {"n": MIXTURE_ROWS, "y": mixture_data()},
        "sampler": {"chains": chains, "draws": draws, "warmup_iterations": 1000, "seed": seed},
    }


def exact_mixture() -> dict:
    """Enumerate all 2^10 assignments. Given an assignment, component k's rows are jointly
    normal with mean m_k and covariance I + s0^2 11^T (the location integrated out; BDA3 section
    2.5), evaluated by scipy.stats.multivariate_normal; the location's posterior is normal with
    precision 1/s0^2 + n_k and mean (m_k/s0^2 + sum of its rows) / precision."""
    y = np.array(mixture_data())
    prior = LOG_WEIGHTS - logsumexp(LOG_WEIGHTS)
    s0sq = COMPONENT_SCALE**2
    log_post, membership, moments = [], [], []
    for assignment in itertools.product((0, 1), repeat=MIXTURE_ROWS):
        z = np.array(assignment)
        total = float(prior[z].sum())
        means, second = [], []
        for k in (0, 1):
            rows = y[z == k]
            n = rows.size
            if n:
                total += stats.multivariate_normal.logpdf(
                    rows, np.full(n, COMPONENT_MEANS[k]), np.eye(n) + s0sq * np.ones((n, n)))
            precision = 1.0 / s0sq + n
            mean = (COMPONENT_MEANS[k] / s0sq + rows.sum()) / precision
            means.append(mean)
            second.append(1.0 / precision + mean**2)
        log_post.append(total)
        membership.append(z)
        moments.append((means, second))
    w = np.exp(np.array(log_post) - logsumexp(log_post))
    membership_array = np.array(membership)
    means = np.array([m for m, _ in moments])
    seconds = np.array([s for _, s in moments])
    mean, second = w @ means, w @ seconds
    return {"second_component": w @ membership_array, "mu_sd": np.sqrt(second - mean**2)}


@pytest.mark.slow
def test_mixture_membership_and_locations_match_the_enumeration():
    """P(row i in component 2) within 4 MCSE for every row whose membership has probability at
    least RARE either way; the rarer ones together as the expected number of rows outside their
    likelier component. Then the sds of both locations as a family with the power of the module
    docstring."""
    exact = exact_mixture()
    result = run_in_process(mixture_body(chains=4, draws=20_000, seed=20261204))
    check_mixture_draws(result, exact)


def check_mixture_draws(result: dict, exact: dict) -> None:
    """Each row's membership within TOLERANCE_MCSE batch-means errors of the enumeration (the
    rare ones pooled), then the sds of both locations as a family with its power asserted."""
    names = result["names"]
    draws = result["draws"]
    wide = []
    rare_seen, rare_expected = 0.0, 0.0
    for i, p in enumerate(exact["second_component"]):
        indicator = (draws[:, :, names.index(f"z[{i + 1}]")] == 2).astype(float)
        if min(p, 1 - p) < RARE:
            minority = indicator if p < 0.5 else 1.0 - indicator
            rare_seen = rare_seen + minority
            rare_expected += min(p, 1 - p)
            continue
        se = batch_means_se(indicator)
        if abs(indicator.mean() - p) > TOLERANCE_MCSE * se:
            wide.append(f"row {i + 1}: {indicator.mean():.4f} vs {p:.4f} (se {se:.4f})")
    if rare_expected:
        se = batch_means_se(np.asarray(rare_seen))
        if abs(np.mean(rare_seen) - rare_expected) > TOLERANCE_MCSE * se:
            wide.append(f"rare memberships: {np.mean(rare_seen):.5f} vs {rare_expected:.5f}")
    assert not wide, wide
    checks = [sd_check(f"mu[{k + 1}]", draws[:, :, names.index(f"mu[{k + 1}]")],
                       float(exact["mu_sd"][k])) for k in (0, 1)]
    assert not failures(checks), failures(checks)
    assert power_shortfall(checks) is None, power_shortfall(checks)
