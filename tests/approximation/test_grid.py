"""The grid posterior against closed forms (BDA3, Gelman et al. 2013).

- Section 2.4: binomial data with a beta prior, posterior beta(a + y, b + n - y); the normaliser
  is the beta-binomial evidence C(n, y) B(a + y, b + n - y) / B(a, b).
- Section 3.2: normal data with unknown mean and variance under p(mu, log sigma) flat (the prior
  p(mu, sigma^2) proportional to 1/sigma^2): mu | y ~ t_{n-1}(ybar, s^2/n), so Var(mu | y) =
  (s^2/n)(n-1)/(n-3); sigma^2 | y ~ scaled inverse chi-square(n-1, s^2), that is inverse-gamma
  ((n-1)/2, (n-1)s^2/2), with E[sigma^2] = (n-1)s^2/(n-3) and E[sigma] =
  sqrt(beta) Gamma(alpha - 1/2) / Gamma(alpha).
"""

import numpy as np
import pytest
from scipy import special, stats

from worker.approximation.grid import GridTooLarge, grid_posterior
from worker.modeling import compile_model

BINOMIAL = {
    "inputs": {"n": {"type": "integer"}, "y": {"type": "integer", "lower": 0}},
    "unknowns": {"p": {"lower": 0, "upper": 1}},
    "priors": [{"on": "p", "distribution": "beta", "arguments": {"a": 2, "b": 3}}],
    "likelihood": [{"name": "successes", "observed": "y", "distribution": "binomial",
                    "arguments": {"trials": "n", "probability": "p"}}],
}


def test_beta_posterior_moments_quantiles_and_evidence():
    model = compile_model(BINOMIAL, {"n": 20, "y": 7})
    result = grid_posterior(model, np.random.default_rng(0))
    exact = stats.beta(9, 16)
    assert result.means[0] == pytest.approx(exact.mean(), abs=1e-6)
    assert result.sds[0] == pytest.approx(exact.std(), abs=1e-6)
    for p, value in result.quantiles.items():
        assert value[0] == pytest.approx(exact.ppf(p), abs=1e-4)
    evidence = np.log(special.comb(20, 7)) + special.betaln(9, 16) - special.betaln(2, 3)
    assert result.log_evidence == pytest.approx(evidence, abs=1e-6)
    assert result.outside_mass < 1e-10
    # Draws by inverse transform: a Kolmogorov-Smirnov test against the exact beta does not
    # reject at the 0.1% level (a deterministic seed; the KS critical value 1.95 / sqrt(4000) =
    # 0.031 in the cdf is a shift of 0.031 / 0.4 = 0.08 sd at the centre).
    assert stats.kstest(result.draws[:, 0], exact.cdf).pvalue > 1e-3


NORMAL_TWO_UNKNOWNS = {
    "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"mu": {"flat_prior": True}, "log_sigma": {"flat_prior": True}},
    "derived": {"sigma": "exp(log_sigma)", "variance": "exp(2 * log_sigma)"},
    "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "mu", "scale": "sigma"}}],
}


def test_normal_with_unknown_mean_and_scale():
    rng = np.random.default_rng(5)
    n = 12
    y = rng.normal(10.0, 2.0, size=n)
    model = compile_model(NORMAL_TWO_UNKNOWNS, {"n": n, "y": y.tolist()})
    result = grid_posterior(model, np.random.default_rng(1))
    s2 = y.var(ddof=1)
    alpha, beta = (n - 1) / 2, (n - 1) * s2 / 2
    names = result.names
    mu, sigma, variance = (names.index(k) for k in ("mu", "sigma", "variance"))
    assert result.means[mu] == pytest.approx(y.mean(), rel=1e-6)
    assert result.sds[mu] ** 2 == pytest.approx(s2 / n * (n - 1) / (n - 3), rel=1e-6)
    expected_sigma = np.sqrt(beta) * np.exp(special.gammaln(alpha - 0.5) - special.gammaln(alpha))
    assert result.means[sigma] == pytest.approx(expected_sigma, rel=1e-6)
    assert result.means[variance] == pytest.approx(beta / (alpha - 1), rel=1e-6)
    marginal_mu = stats.t(n - 1, loc=y.mean(), scale=np.sqrt(s2 / n))
    for p, value in result.quantiles.items():
        assert value[mu] == pytest.approx(marginal_mu.ppf(p), abs=1e-4 * np.sqrt(s2 / n))
    assert result.outside_mass < 1e-10


def test_three_unknowns_are_refused():
    spec = {
        "unknowns": {"a": {}, "b": {}, "c": {}},
        "priors": [{"on": k, "distribution": "normal", "arguments": {"location": 0, "scale": 1}}
                   for k in "abc"],
        "likelihood": [],
    }
    with pytest.raises(GridTooLarge, match="this model has 3"):
        grid_posterior(compile_model(spec, {}), np.random.default_rng(0))
