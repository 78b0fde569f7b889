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
from statsmodels.datasets import longley

from tests.validation.agreement import METHODS, column, mismatches, run, summary_of


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
