"""Hierarchical geometry: the eight schools and Neal's funnel.

Eight schools: Rubin (1981), "Estimation in parallel randomized experiments", J. Educational
Statistics 6(4); data as reprinted in BDA3 Table 5.2 (Gelman et al. 2013), given here from memory:
y = (28, 8, -3, 7, -1, 1, 18, 12), sigma = (15, 10, 16, 11, 9, 11, 10, 18). Model: y_j ~ N(theta_j,
sigma_j), theta_j ~ N(mu, tau), a flat prior on mu and a half-Cauchy(0, 5) prior on tau. Reference:
BDA3 section 5.4 (equations for p(tau | y), E[mu | tau, y] and Var[mu | tau, y] under a flat
prior on mu, multiplied here by the half-Cauchy prior), integrated in one dimension with
scipy.integrate.quad:
    mu_hat(tau) = sum(y_j / (sigma_j^2 + tau^2)) / sum(1 / (sigma_j^2 + tau^2)),
    V_mu(tau)   = 1 / sum(1 / (sigma_j^2 + tau^2)),
    p(tau | y)  ~ p(tau) V_mu^(1/2) prod (sigma_j^2 + tau^2)^(-1/2)
                  exp(-(y_j - mu_hat)^2 / (2 (sigma_j^2 + tau^2))).
The centred form has the funnel-shaped posterior that makes NUTS diverge (common practice;
Betancourt 2017 discusses it); it must report divergences and fail the verdict. The non-centred
form theta = mu + tau eta, eta ~ N(0, 1), must pass the verdict with NUTS.

Neal's funnel: Neal (2003), "Slice sampling", Annals of Statistics 31(3), section 8: v ~ N(0, 3^2)
and x_i | v ~ N(0, e^v) for i = 1..9, so the marginal of v is exactly N(0, 3^2).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from tests.validation.agreement import METHODS, from_scipy, mismatches, record_of, run

Y = np.array([28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0])
SIGMA = np.array([15.0, 10.0, 16.0, 11.0, 9.0, 11.0, 10.0, 18.0])
TAU_PRIOR_SCALE = 5.0


def _schools_spec(centred: bool) -> dict:
    spec: dict = {
        "inputs": {"schools": {"type": "integer"},
                   "effect": {"type": "real", "shape": ["schools"]},
                   "standard_error": {"type": "real", "shape": ["schools"], "lower": 0}},
        "unknowns": {"mu": {"flat_prior": True}, "tau": {"lower": 0}},
        "priors": [{"on": "tau", "distribution": "half_cauchy",
                    "arguments": {"scale": TAU_PRIOR_SCALE}}],
        "likelihood": [{"name": "observed_effect", "observed": "effect", "distribution": "normal",
                        "arguments": {"location": "theta", "scale": "standard_error"}}],
    }  # fmt: skip
    if centred:
        spec["unknowns"]["theta"] = {"shape": ["schools"]}
        spec["priors"].append(
            {
                "on": "theta",
                "distribution": "normal",
                "arguments": {"location": "mu", "scale": "tau"},
            }
        )
    else:
        spec["unknowns"]["eta"] = {"shape": ["schools"]}
        spec["derived"] = {"theta": "mu + tau * eta"}
        spec["priors"].append(
            {"on": "eta", "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
        )
    return spec


SCHOOLS_DATA = {"schools": 8, "effect": Y.tolist(), "standard_error": SIGMA.tolist()}


def _tau_pieces(tau: float) -> tuple[float, float, float]:
    """Unnormalised p(tau | y), mu_hat(tau) and V_mu(tau) (BDA3 section 5.4)."""
    total = SIGMA**2 + tau**2
    v_mu = 1.0 / np.sum(1.0 / total)
    mu_hat = v_mu * np.sum(Y / total)
    log_p = (
        stats.halfcauchy.logpdf(tau, scale=TAU_PRIOR_SCALE)
        + 0.5 * np.log(v_mu)
        - 0.5 * np.sum(np.log(total))
        - 0.5 * np.sum((Y - mu_hat) ** 2 / total)
    )
    return float(np.exp(log_p)), float(mu_hat), float(v_mu)


def schools_reference() -> dict[str, dict[str, float]]:
    """Posterior mean and sd of mu and tau by quadrature over tau."""

    def moment(f) -> float:
        return integrate.quad(lambda t: f(t) * _tau_pieces(t)[0], 0, np.inf, limit=200)[0]

    norm = moment(lambda t: 1.0)
    e_tau = moment(lambda t: t) / norm
    e_tau2 = moment(lambda t: t * t) / norm
    e_mu = moment(lambda t: _tau_pieces(t)[1]) / norm
    e_mu2 = moment(lambda t: _tau_pieces(t)[2] + _tau_pieces(t)[1] ** 2) / norm
    return {
        "mu": {"mean": e_mu, "sd": float(np.sqrt(e_mu2 - e_mu**2))},
        "tau": {"mean": e_tau, "sd": float(np.sqrt(e_tau2 - e_tau**2))},
    }


@pytest.fixture(scope="module")
def reference() -> dict[str, dict[str, float]]:
    return schools_reference()


def test_quadrature_reference_is_sane(reference: dict) -> None:
    """E[mu | y] must lie between the smallest and largest school effect, and E[tau | y] must be
    positive and below the prior's median-scale tail; with these data BDA3 section 5.5 reports
    a posterior for tau concentrated below about 20 (from memory)."""
    assert Y.min() < reference["mu"]["mean"] < Y.max()
    assert 0 < reference["tau"]["mean"] < 20


@pytest.mark.slow
@pytest.mark.parametrize("method", METHODS)
def test_non_centred_schools_match_quadrature(method: str, reference: dict) -> None:
    """NUTS runs with target acceptance 0.9: at the default 0.8 the half-Cauchy tail of tau gave
    one or two divergences in 4000 draws for each of four seeds we tried, and raising the target
    for hierarchical models is common practice; at 0.9 the verdict passed for all four."""
    extra = {"target_acceptance": 0.9} if method == "nuts" else {}
    outcome = run(_schools_spec(centred=False), SCHOOLS_DATA, method, seed=1981, **extra)
    problems = []
    for name in ("mu", "tau"):
        problems += mismatches(record_of(outcome, name), reference[name])
    assert not problems, problems
    if method == "nuts":
        assert outcome["verdict"]["passed"], outcome["verdict"]["failed_checks"]


@pytest.mark.slow
def test_non_centred_schools_with_a_normal_prior_on_mu_pass_at_target_acceptance_095() -> None:
    """The outside report's model (mu ~ normal(0, 5); tests/samplers/eight_schools.py) through the
    spec and the runner. At the defaults 15 of 16 seeds (100-115) reported 1-7 divergences and
    failed the verdict (docs/validation.md, "The non-centred eight schools at the defaults"); at
    target acceptance 0.95 none of the 16 diverged. This checks the verdict and that the spec is the
    density the sampler tests use; the accuracy of the draws, with the power to see a 2 % sd
    error, is checked by tests/samplers/test_long_runs.py and test_nuts_invariance.py."""
    from tests.samplers.eight_schools import DATA, SPEC, NonCentredSchools
    from worker.modeling import compile_model

    model, written = compile_model(SPEC, DATA), NonCentredSchools()
    rng = np.random.default_rng(5)
    offsets = []
    for u in rng.normal(size=(5, written.dimension)):
        (a, ga), (b, gb) = model.log_density_and_gradient(u), written.log_density_and_gradient(u)
        offsets.append(a - b)
        assert np.allclose(ga, gb, rtol=1e-12, atol=1e-12)
    assert np.ptp(offsets) < 1e-9  # equal up to the normalising constant
    outcome = run(SPEC, DATA, "nuts", seed=1981, warmup_iterations=1000, target_acceptance=0.95)
    assert outcome["sampler"]["divergences"] == 0
    assert outcome["verdict"]["passed"], outcome["verdict"]["failed_checks"]


@pytest.mark.slow
def test_centred_schools_diverge_and_fail_the_verdict() -> None:
    """Two chains, a shorter run and a tree depth limit of 6 keep this quick: trajectories in the
    funnel's neck are long, and divergences show up well within 2 x 400 draws (21 here)."""
    outcome = run(
        _schools_spec(centred=True), SCHOOLS_DATA, "nuts", seed=1981, chains=2,
        warmup_iterations=300, draws=400, maximum_tree_depth=6,
    )  # fmt: skip
    assert outcome["sampler"]["divergences"] > 0
    assert not outcome["verdict"]["passed"]
    failed = {f["check"] for f in outcome["verdict"]["failed_checks"]}
    assert "max_divergences" in failed


FUNNEL_SIZE = 9


def _funnel_spec(centred: bool) -> dict:
    spec: dict = {
        "inputs": {},
        "unknowns": {"v": {}},
        "priors": [{"on": "v", "distribution": "normal", "arguments": {"location": 0, "scale": 3}}],
    }
    if centred:
        # the scale goes through a derived quantity: an inline expression of an unknown as a prior
        # argument is currently refused by the model checks (reported to the modeling part)
        spec["unknowns"]["x"] = {"shape": [FUNNEL_SIZE]}
        spec["derived"] = {"x_scale": "exp(v / 2)"}
        spec["priors"].append(
            {"on": "x", "distribution": "normal", "arguments": {"location": 0, "scale": "x_scale"}}
        )
    else:
        spec["unknowns"]["z"] = {"shape": [FUNNEL_SIZE]}
        spec["derived"] = {"x": "exp(v / 2) * z"}
        spec["priors"].append(
            {"on": "z", "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
        )
    return spec


@pytest.mark.slow
def test_centred_funnel_reports_divergences() -> None:
    """Shorter run and tree depth limit 6 for time, as for the centred schools; each of three
    seeds tried reported divergences."""
    outcome = run(
        _funnel_spec(centred=True), {}, "nuts", seed=1,
        warmup_iterations=300, draws=400, maximum_tree_depth=6,
    )  # fmt: skip
    assert outcome["sampler"]["divergences"] > 0
    assert "max_divergences" in {f["check"] for f in outcome["verdict"]["failed_checks"]}


@pytest.mark.parametrize("method", METHODS)
def test_non_centred_funnel_recovers_the_marginal_of_v(method: str) -> None:
    outcome = run(_funnel_spec(centred=False), {}, method, seed=2003)
    problems = mismatches(record_of(outcome, "v"), from_scipy(stats.norm(0.0, 3.0)))
    assert not problems, problems
    if method == "nuts":
        assert outcome["sampler"]["divergences"] == 0
