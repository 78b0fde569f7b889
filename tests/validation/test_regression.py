"""Linear and logistic regression against statsmodels fits.

Linear: BDA3 section 14.2 (Gelman et al. 2013): with the standard noninformative prior
p(beta, sigma^2) ~ 1 / sigma^2, the coefficients' marginal posterior is multivariate t with n - k
degrees of freedom, centred at the least-squares estimate with scale s^2 (X'X)^-1; so each
posterior mean is the OLS coefficient and each posterior sd is the OLS standard error times
sqrt((n - k) / (n - k - 2)). Data: Longley (1967), shipped by statsmodels
(statsmodels.datasets.longley), one of the NIST StRD regression datasets with certified values.
Longley's columns are nearly collinear and differ in scale by 10^5, so the data we pass are
transformed: the response and covariates are standardised, and the standardised covariates are
replaced by the orthogonal factor Q of their thin QR decomposition (scaled by sqrt(n - 1)), which
makes the sampled coefficients theta nearly uncorrelated. Every step is an affine change of the
coefficients, which keeps a flat prior flat; the original coefficients are recovered from the
draws (gamma = R^-1 theta, then undoing the standardisation) and summarised with our own MCSE.
The prior flat on (alpha, theta, log sigma) is exactly p(beta, sigma^2) ~ 1 / sigma^2.

Logistic: with a weak prior and a few thousand rows the posterior mean agrees with the maximum
likelihood estimate to a small fraction of its standard error (large-sample agreement, the
Bernstein-von Mises theorem; common practice), so we require agreement with statsmodels' Logit
within 0.1 standard error, plus 4 MCSE for the Monte Carlo error of our estimate; and the posterior
sd within 10% (plus 4 MCSE) of the MLE standard error.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.datasets import longley

from tests.validation.agreement import (
    METHODS,
    PROBABILITIES,
    column,
    mismatches,
    run,
    summary_of,
)


def _longley() -> tuple[np.ndarray, np.ndarray]:
    frame = longley.load_pandas()
    return frame.exog.to_numpy(dtype=float), frame.endog.to_numpy(dtype=float)


LINEAR_SPEC = {
    "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
               "x": {"type": "real", "shape": ["n", "k"]}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"alpha": {"flat_prior": True}, "gamma": {"shape": ["k"], "flat_prior": True},
                 "log_sigma": {"flat_prior": True}},
    "likelihood": [{"name": "response", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "alpha + x @ gamma", "scale": "exp(log_sigma)"}}],
}  # fmt: skip


@pytest.mark.parametrize("method", METHODS)
def test_longley_flat_prior_posterior_matches_ols(method: str) -> None:
    x, y = _longley()
    n, k = x.shape
    x_mean, x_sd = x.mean(axis=0), x.std(axis=0, ddof=1)
    y_mean, y_sd = y.mean(), y.std(ddof=1)
    q, r = np.linalg.qr((x - x_mean) / x_sd)
    q, r = q * np.sqrt(n - 1), r / np.sqrt(n - 1)
    data = {"n": n, "k": k, "x": q.tolist(), "y": ((y - y_mean) / y_sd).tolist()}
    outcome = run(LINEAR_SPEC, data, method, seed=1967)
    alpha = column(outcome, "alpha")
    theta = np.stack([column(outcome, f"gamma[{j + 1}]") for j in range(k)], axis=-1)
    gamma = np.linalg.solve(r, theta[..., None])[..., 0]
    # back to the original scale: beta_j = gamma_j sd_y / sd_j, intercept from the centring
    slopes = gamma * (y_sd / x_sd)
    intercept = y_mean + y_sd * alpha - slopes @ x_mean
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    inflation = np.sqrt((n - (k + 1)) / (n - (k + 1) - 2))
    problems = []
    for j, draws in enumerate([intercept, *np.moveaxis(slopes, -1, 0)]):
        record = summary_of(draws, f"beta[{j}]")
        problems += mismatches(record, {"mean": ols.params[j], "sd": ols.bse[j] * inflation})
    assert not problems, problems


# NIST StRD, Longley (certified values, from memory; statsmodels' OLS on the same data reproduces
# them, which the test checks first): intercept and the six slopes, and their standard errors.
LONGLEY_CERTIFIED = np.array([-3482258.63459582, 15.0618722713733, -0.358191792925910e-01,
                              -2.02022980381683, -1.03322686717359, -0.511041056535807e-01,
                              1829.15146461355])
LONGLEY_CERTIFIED_SE = np.array([890420.383607373, 84.9149257747669, 0.334910077722432e-01,
                                 0.488399681651699, 0.214274163161675, 0.226073200069370,
                                 455.478499142212])
LONGLEY_CERTIFIED_RESIDUAL_SD = 304.854073561965
RAW_LINEAR_SPEC = {
    "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
               "X": {"type": "real", "shape": ["n", "k"]}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"beta": {"shape": ["k"], "flat_prior": True},
                 "log_sigma": {"flat_prior": True}},
    "derived": {"sigma": "exp(log_sigma)"},
    "likelihood": [{"name": "employment", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "X @ beta", "scale": "sigma"}}],
}  # fmt: skip
# a 2% error in an sd is seen with power 0.9 by a 4-MCSE test when MCSE(sd) <= 0.02 / 5.28 sd
POWER_BOUND = 0.02 / (4.0 + 1.28)


@pytest.mark.slow
def test_raw_longley_reaches_the_certified_values_with_the_qr_reparametrisation() -> None:
    """Issue 11 item 4: the raw Longley data (no standardising by hand; the design matrix with its
    column of ones has condition number about 5e9) under p(beta, sigma) ∝ 1/sigma, sampled with
    the default NUTS settings and the automatic QR reparametrisation, against the NIST StRD
    certified coefficients: each posterior mean within 4 MCSE of the certified coefficient and
    each posterior sd within 4 MCSE of the certified standard error times
    sqrt((n - k)/(n - k - 2)) (BDA3 section 14.2: the marginal posterior is t with n - k = 9
    degrees of freedom), and sigma's 5/50/95% quantiles those of sigma^2 ~ Inv-gamma((n-k)/2,
    (n-k) s^2 / 2) with s the certified residual sd (BDA3 section 14.2).

    Power: the relative standard error of an sd from an effective sample size E is
    sqrt((kappa - 1)/(4E)), kappa = 3 + 6/(9 - 4) = 4.2 for t_9 (common practice); a 2% error is
    seen with probability 0.9 when MCSE(sd) <= 0.0038 sd, i.e. E >= 56 000. The sd's effective
    sample size here is about 0.39 per draw (measured on this model: MCSE(sd) 0.58% of the sd from
    60 000 draws, lower at some seeds), so 4 chains of 42 000 draws give about 65 000, a margin
    over 56 000; the test asserts the reported
    MCSE of every coefficient's sd meets the bound, so the power is checked on each run. Without
    the reparametrisation the same job took minutes and did not converge (issue 11).
    """
    x, y = _longley()
    design = np.column_stack([np.ones(len(y)), x])
    n, k = design.shape
    ols = sm.OLS(y, design).fit()
    np.testing.assert_allclose(ols.params, LONGLEY_CERTIFIED, rtol=1e-7)
    np.testing.assert_allclose(ols.bse, LONGLEY_CERTIFIED_SE, rtol=1e-7)
    data = {"n": n, "k": k, "X": design.tolist(), "y": y.tolist()}
    outcome = run(RAW_LINEAR_SPEC, data, "nuts", seed=1967, chains=4, warmup_iterations=1000,
                  draws=42_000)
    [applied] = outcome["sampler"]["reparametrisation"]["applied"]
    assert applied["unknown"] == "beta"
    inflation = np.sqrt((n - k) / (n - k - 2))
    problems = []
    for j in range(k):
        record = summary_of(column(outcome, f"beta[{j + 1}]"), f"beta[{j + 1}]")
        assert record["sd_error"] <= POWER_BOUND * record["sd"], record
        problems += mismatches(record, {"mean": LONGLEY_CERTIFIED[j],
                                        "sd": LONGLEY_CERTIFIED_SE[j] * inflation})
    variance = stats.invgamma((n - k) / 2, scale=(n - k) * LONGLEY_CERTIFIED_RESIDUAL_SD**2 / 2)
    problems += mismatches(summary_of(column(outcome, "sigma"), "sigma"),
                           {label: np.sqrt(variance.ppf(p)) for label, p in PROBABILITIES.items()})
    assert not problems, problems


def _logistic_data() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(4242)
    rows = 3000
    x = rng.normal(size=(rows, 3)) * np.array([1.0, 0.5, 2.0])
    log_odds = -0.5 + x @ np.array([0.8, -1.2, 0.3])
    y = rng.random(rows) < 1 / (1 + np.exp(-log_odds))
    return x, y.astype(int)


LOGISTIC_SPEC = {
    "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
               "x": {"type": "real", "shape": ["n", "k"]},
               "y": {"type": "integer", "shape": ["n"], "lower": 0, "upper": 1}},
    "unknowns": {"alpha": {}, "beta": {"shape": ["k"]}},
    "priors": [
        {"on": "alpha", "distribution": "normal", "arguments": {"location": 0, "scale": 10}},
        {"on": "beta", "distribution": "normal", "arguments": {"location": 0, "scale": 10}},
    ],
    "likelihood": [{"name": "outcome", "observed": "y", "distribution": "bernoulli",
                    "arguments": {"log_odds": "alpha + x @ beta"}}],
}  # fmt: skip


@pytest.mark.slow
@pytest.mark.parametrize("method", METHODS)
def test_logistic_regression_posterior_mean_matches_mle(method: str) -> None:
    x, y = _logistic_data()
    data = {"n": len(y), "k": x.shape[1], "x": x.tolist(), "y": y.tolist()}
    outcome = run(LOGISTIC_SPEC, data, method, seed=3000)
    fit = sm.Logit(y, sm.add_constant(x)).fit(disp=0)
    problems = []
    names = ["alpha"] + [f"beta[{j + 1}]" for j in range(x.shape[1])]
    for j, name in enumerate(names):
        record = summary_of(column(outcome, name), name)
        mean_gap = abs(record["mean"] - fit.params[j])
        if mean_gap > 0.1 * fit.bse[j] + 4 * record["mean_error"]:
            problems.append(f"{name}: mean {record['mean']} vs MLE {fit.params[j]}")
        sd_gap = abs(record["sd"] - fit.bse[j])
        if sd_gap > 0.1 * fit.bse[j] + 4 * record["sd_error"]:
            problems.append(f"{name}: sd {record['sd']} vs MLE se {fit.bse[j]}")
    assert not problems, problems


def _depth_failures(outcome: dict) -> list[dict]:
    return [f for f in outcome["verdict"]["failed_checks"] if f["check"] == "max_depth_saturation"]


@pytest.mark.slow
def test_raw_collinear_regression_saturates_the_tree_depth_and_the_verdict_says_so() -> None:
    """Longley's raw covariates (NIST StRD; statsmodels' longley dataset): scales from about 1e2
    to 1e5 and near-collinear columns, so the flat-prior posterior is extremely ill-conditioned
    (the condition number of X'X with an intercept column is about 5e9 by numpy here) and NUTS
    with a diagonal metric runs its trajectories to the depth cap once warm-up has found the
    bulk (after a 200-iteration warm-up most trees were still short). The cap is lowered to 7
    (127 leapfrog steps) and the run shortened to keep the test to a few seconds; 149 of 150
    draws per chain reached it at this seed, as 94-98 % did at the defaults in the outside
    report. The QR reparametrisation, which cures exactly this, is turned off here."""
    x, y = _longley()
    n, k = x.shape
    design = np.column_stack([np.ones(n), x])
    assert np.linalg.cond(design.T @ design) > 1e9
    data = {"n": n, "k": k, "x": x.tolist(), "y": y.tolist()}
    outcome = run(
        LINEAR_SPEC, data, "nuts", seed=1967, chains=2,
        warmup_iterations=500, draws=150, maximum_tree_depth=7, reparametrise=False,
    )  # fmt: skip
    (failure,) = _depth_failures(outcome)
    report = outcome["sampler"]
    assert failure["value"] == report["tree_depth_hits"] / sum(report["draws_per_chain"])
    assert failure["value"] > 0.9 and failure["threshold"] == 0.05
    assert "maximum tree depth of 7" in failure["message"]


def test_standardised_regression_does_not_saturate_the_tree_depth() -> None:
    """The same Longley regression on standardised, QR-orthogonalised covariates (as in
    test_longley_flat_prior_posterior_matches_ols): well conditioned, short trajectories, so the
    depth check stays quiet at the default cap of 10."""
    x, y = _longley()
    n, k = x.shape
    q, _ = np.linalg.qr((x - x.mean(axis=0)) / x.std(axis=0, ddof=1))
    data = {
        "n": n,
        "k": k,
        "x": (q * np.sqrt(n - 1)).tolist(),
        "y": ((y - y.mean()) / y.std()).tolist(),
    }
    outcome = run(LINEAR_SPEC, data, "nuts", seed=1967)
    assert not _depth_failures(outcome)
    assert outcome["sampler"]["tree_depth_hits"] == 0
