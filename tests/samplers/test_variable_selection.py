"""Variable selection by one inclusion indicator per covariate, against Zellner's g-prior in
closed form, enumerating all 2^p models.

The model (Liang, Paulo, Molina, Clyde & Berger 2008, Mixtures of g priors for Bayesian variable
selection, JASA 103, section 2): y = alpha + X_g beta_g + e, e ~ N(0, sigma^2 I), p(alpha,
sigma^2) proportional to 1/sigma^2, beta_g ~ N(0, g sigma^2 (X_g' X_g)^-1) for the included
covariates, each of the p covariates included with probability 1/2 independently. With centred
X, S = |y - ybar|^2 and R^2_g the coefficient of determination of model g, the marginal
likelihood is proportional to (1 + g)^((n - 1 - p_g) / 2) (1 + g (1 - R^2_g))^(-(n - 1) / 2)
(their equation for the g-prior's Bayes factor; from memory, and derived again here: alpha
integrated out, y | sigma^2 ~ N(0, sigma^2 (I + g H_g)) on the n - 1 centred dimensions, with
determinant (1 + g)^p_g and quadratic form S (1 - s R^2_g) / sigma^2, s = g / (1 + g)). Given g,
sigma^2 | y ~ inverse-gamma((n - 1) / 2, S (1 - s R^2_g) / 2) and beta_g | sigma^2, y ~
N(s bhat_g, s sigma^2 (X_g' X_g)^-1), so E[beta_j | y, g] = s bhat_j and Var = s E[sigma^2 | y,
g] / n for the orthogonal columns used here (X' X = n I, which makes the g-prior the independent
N(0, g sigma^2 / n) of the spec below).

The spec is the spike-and-slab pattern with coupled indicators (George & McCulloch 1993; the
form with the indicator multiplying the slope): location alpha + X @ (included * slope), slope ~
N(0, sqrt(g / n) sigma) whether included or not. An excluded slope leaves the likelihood and
keeps a prior that integrates to one for every sigma, so the posterior of the indicators and of
the effects included * slope is that of the g-prior model.

Checks: each covariate's posterior inclusion probability within 4 MCSE (batch means), and the
sds of the effects included * slope as a Bonferroni family at level 0.01 with the power the
test asserts on its own draws (a 2 % sd error moving the strongest check by at least critical +
2.33 se; tests/samplers/quantile_checks.py). Measured: 4 chains of 8,000 draws moved the
strongest check by 2.98 se against the 5.42 needed for 5 checks, so the test runs 4 chains of
30,000 (se shrinking as the square root of the draws: about 5.8 se).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.special import logsumexp

from tests.samplers.batch_means import TOLERANCE_MCSE, batch_means_se
from tests.samplers.quantile_checks import failures, power_shortfall, sd_check
from worker.runner import run_in_process

ROWS, COVARIATES = 40, 5
G = float(ROWS)  # the unit-information choice g = n (Liang et al. 2008, section 2.1)
RARE = 0.002  # inclusions (or exclusions) rarer than this are checked together


def design() -> tuple[np.ndarray, np.ndarray]:
    """Orthogonal centred columns scaled to X'X = n I, and y with two clear effects, one weak
    and two absent: invented test input, drawn once from a seeded generator (exact inclusion
    probabilities 0.9997, 0.144, 0.997, 0.330, 0.137)."""
    rng = np.random.default_rng(1993)
    raw = rng.normal(size=(ROWS, COVARIATES))
    q, _ = np.linalg.qr(raw - raw.mean(axis=0))
    X = np.sqrt(ROWS) * q
    y = 1.0 + X @ np.array([0.8, 0.0, -0.5, 0.3, 0.0]) + rng.normal(size=ROWS)
    return X, y


def exact() -> dict:
    X, y = design()
    yc = y - y.mean()
    total = float(yc @ yc)
    s = G / (1 + G)
    log_post, inclusion, moments = [], [], []
    for pattern in itertools.product((0, 1), repeat=COVARIATES):
        included = np.array(pattern, dtype=bool)
        bhat = np.zeros(COVARIATES)
        bhat[included] = X[:, included].T @ yc / ROWS  # X'X = n I
        fitted = X @ bhat
        r2 = float(fitted @ fitted) / total
        k = int(included.sum())
        log_post.append(0.5 * (ROWS - 1 - k) * np.log1p(G)
                        - 0.5 * (ROWS - 1) * np.log1p(G * (1 - r2)))
        sigma2 = total * (1 - s * r2) / (ROWS - 3)  # inverse-gamma mean
        mean = s * bhat
        second = np.where(included, s * sigma2 / ROWS, 0.0) + mean**2
        inclusion.append(included)
        moments.append((mean, second))
    w = np.exp(np.array(log_post) - logsumexp(log_post))
    mean = w @ np.array([m for m, _ in moments])
    second = w @ np.array([q for _, q in moments])
    return {"inclusion": w @ np.array(inclusion, dtype=float),
            "effect_sd": np.sqrt(second - mean**2)}


def body(chains: int, draws: int, seed: int) -> dict:
    X, y = design()
    return {
        "model": {
            "likelihood": [{"name": "y", "observed": "y", "distribution": "normal",
                            "arguments": {"location": "alpha + X @ (included * slope)",
                                          "scale": "exp(log_sigma)"}}],
            "inputs": {"n": {"type": "integer"}, "p": {"type": "integer"},
                       "y": {"type": "real", "shape": ["n"]},
                       "X": {"type": "real", "shape": ["n", "p"]}},
            "unknowns": {
                "alpha": {"flat_prior": True},
                "log_sigma": {"flat_prior": True},  # p(sigma^2) proportional to 1 / sigma^2
                "slope": {"shape": ["p"]},
                "included": {"type": "integer", "shape": ["p"], "lower": 0, "upper": 1},
            },
            "priors": [
                {"on": "included", "distribution": "bernoulli",
                 "arguments": {"probability": 0.5}},
                {"on": "slope", "distribution": "normal",
                 "arguments": {"location": 0, "scale": f"{np.sqrt(G / ROWS)} * exp(log_sigma)"}},
            ],
            "per_draw": {"formulas": {"effect": "included * slope"}},
        },
        "data": {"n": ROWS, "p": COVARIATES, "y": y.tolist(), "X": X.tolist()},
        "sampler": {"chains": chains, "draws": draws, "warmup_iterations": 1000, "seed": seed},
    }


@pytest.mark.slow
@pytest.mark.timeout(2700)  # 120,000 iterations: 15.6 min at a load average of 10 on 2 cores
def test_inclusion_probabilities_match_the_g_prior_enumeration():
    reference = exact()
    assert 0.2 < reference["inclusion"][3] < 0.8  # the weak effect is genuinely uncertain
    result = run_in_process(body(chains=4, draws=30_000, seed=2008))
    names, draws = result["names"], result["draws"]
    wide = []
    rare_seen, rare_expected = 0.0, 0.0
    for j, p in enumerate(reference["inclusion"]):
        indicator = draws[:, :, names.index(f"included[{j + 1}]")]
        if min(p, 1 - p) < RARE:  # checked together, as the expected number of rare states
            rare_seen = rare_seen + (indicator if p < 0.5 else 1.0 - indicator)
            rare_expected += min(p, 1 - p)
            continue
        se = batch_means_se(indicator)
        if abs(indicator.mean() - p) > TOLERANCE_MCSE * se:
            wide.append(f"covariate {j + 1}: {indicator.mean():.4f} vs {p:.4f} (se {se:.4f})")
    if rare_expected:
        se = batch_means_se(np.asarray(rare_seen))
        if abs(np.mean(rare_seen) - rare_expected) > TOLERANCE_MCSE * se:
            wide.append(f"rare states: {np.mean(rare_seen):.5f} vs {rare_expected:.5f}")
    assert not wide, wide
    checks = [sd_check(f"effect[{j + 1}]", draws[:, :, names.index(f"effect[{j + 1}]")],
                       float(reference["effect_sd"][j])) for j in range(COVARIATES)]
    assert not failures(checks), failures(checks)
    assert power_shortfall(checks) is None, power_shortfall(checks)
