"""The Laplace approximation against closed forms, statsmodels, and its own PSIS check.

Sources: BDA3 (Gelman et al. 2013) section 2.5 for the normal mean with known variance and
section 2.6 for the Poisson rate with a gamma prior; Spector & Mazzeo (1980), the logit example
data shipped with statsmodels (statsmodels.datasets.spector), with statsmodels' Logit MLE as the
reference; Vehtari et al. (2024), "Pareto smoothed importance sampling", for k-hat.
"""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from worker.approximation.laplace import importance_resample, laplace
from worker.approximation.mode import ModeNotFound, find_mode
from worker.modeling import compile_model

NORMAL_MEAN = {
    "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
    "unknowns": {"mu": {}},
    "priors": [{"on": "mu", "distribution": "normal", "arguments": {"location": 1, "scale": 10}}],
    "likelihood": [{"name": "obs", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "mu", "scale": 2}}],
}


def test_exact_on_the_conjugate_normal_model():
    """BDA3 section 2.5: posterior precision 1/10^2 + n/2^2, mean precision-weighted. The
    posterior is Gaussian in mu, so the mode is its mean, the curvature its exact precision
    (central differences of a linear gradient are exact to rounding), and the ratios are
    constant: trustworthy."""
    y = np.array([3.1, 1.7, 4.4, 2.2, 0.9, 3.8, 2.6, 5.0, 1.2, 3.3])
    model = compile_model(NORMAL_MEAN, {"n": y.size, "y": y.tolist()})
    result = laplace(model, np.random.default_rng(1))
    precision = 1 / 100 + y.size / 4
    mean = (1 / 100 + y.sum() / 4) / precision
    assert result.mode[0] == pytest.approx(mean, rel=1e-8)
    assert result.covariance[0, 0] == pytest.approx(1 / precision, rel=1e-6)
    assert result.verdict == "trustworthy"
    assert result.disagreements == []
    # Gaussian draws of mu: the sample mean is within 4 standard errors of the exact mean.
    standard_error = np.sqrt(1 / precision / result.values.shape[0])
    assert abs(result.values[:, 0].mean() - mean) < 4 * standard_error


def test_logistic_regression_matches_the_statsmodels_maximum_likelihood_fit():
    """With flat priors the posterior mode is the MLE and the Laplace covariance the inverse
    observed information, which is what statsmodels' Logit reports (its bse)."""
    data = sm.datasets.spector.load_pandas()
    X, y = data.exog.to_numpy(), data.endog.to_numpy().astype(int)
    reference = sm.Logit(y, sm.add_constant(X)).fit(disp=0)
    spec = {
        "inputs": {"n": {"type": "integer"}, "k": {"type": "integer"},
                   "X": {"type": "real", "shape": ["n", "k"]},
                   "y": {"type": "integer", "shape": ["n"], "lower": 0, "upper": 1}},
        "unknowns": {"alpha": {"flat_prior": True},
                     "beta": {"shape": ["k"], "flat_prior": True}},
        "likelihood": [{"name": "grade", "observed": "y", "distribution": "bernoulli",
                        "arguments": {"log_odds": "alpha + X @ beta"}}],
    }
    # compared on the coefficients' own coordinates, so without the QR reparametrisation
    model = compile_model(spec, {"n": y.size, "k": X.shape[1], "X": X.tolist(), "y": y.tolist()},
                          reparametrise=False)
    result = laplace(model, np.random.default_rng(2))
    assert np.allclose(result.mode, reference.params, rtol=1e-6, atol=1e-6)
    assert np.allclose(np.sqrt(np.diag(result.covariance)), reference.bse, rtol=1e-4)
    assert result.values.shape == (4000, 4)


POISSON_RATE = {
    "inputs": {"n": {"type": "integer"}, "y": {"type": "integer", "shape": ["n"], "lower": 0}},
    "unknowns": {"rate": {"lower": 0}},
    "priors": [{"on": "rate", "distribution": "gamma", "arguments": {"shape": 1, "rate": 1}}],
    "likelihood": [{"name": "obs", "observed": "y", "distribution": "poisson",
                    "arguments": {"rate": "rate"}}],
}


@pytest.mark.parametrize("seed", range(5))
def test_a_skewed_posterior_is_flagged_by_k_hat(seed):
    """BDA3 section 2.6: three counts (0, 0, 0) with a gamma(1, 1) prior give the posterior
    gamma(1, 4) for the rate: an exponential, far from Gaussian even on the log scale. Derived
    here: with z the standardised log rate, log r = z - e^z + z^2/2 + const, so the ratios' tail
    is P(r > t) ~ 1/t (k = 1) as z -> -inf. With 20,000 draws k-hat is above 0.5 in every run
    (its sd is about 0.06 at M = 425), so the Gaussian is not called trustworthy; and resampling
    by the smoothed weights moves the mean toward the exact 1/4."""
    model = compile_model(POISSON_RATE, {"n": 3, "y": [0, 0, 0]})
    rng = np.random.default_rng(seed)
    result = laplace(model, rng, draws=20_000)
    assert result.k_hat > 0.5
    assert result.verdict != "trustworthy"
    exact = stats.gamma(1, scale=1 / 4).mean()
    raw_error = abs(result.values[:, 0].mean() - exact)
    weighted = np.sum(np.exp(result.log_weights) * result.values[:, 0])
    assert abs(weighted - exact) < raw_error
    picked = importance_resample(result.log_weights, rng, 2000)
    assert np.unique(picked).size == 2000


class TwoBumps:
    """A mixture 0.7 N(3, 1) + 0.3 N(-3, 1): two optima, the higher at about 3."""

    dimension = 1

    def log_density(self, u):
        return float(np.logaddexp(np.log(0.7) + stats.norm.logpdf(u[0], 3, 1),
                                  np.log(0.3) + stats.norm.logpdf(u[0], -3, 1)))

    def log_density_and_gradient(self, u):
        a = np.log(0.7) + stats.norm.logpdf(u[0], 3, 1)
        b = np.log(0.3) + stats.norm.logpdf(u[0], -3, 1)
        total = np.logaddexp(a, b)
        slope = np.exp(a - total) * (3 - u[0]) + np.exp(b - total) * (-3 - u[0])
        return float(total), np.array([slope])


def test_starts_that_end_at_another_optimum_are_reported():
    search = find_mode(TwoBumps(), np.random.default_rng(0), starts=12, spread=6.0)
    assert search.mode[0] == pytest.approx(3.0, abs=1e-3)
    assert search.disagreements
    assert "more than one mode" in search.disagreements[0]


class NoMaximum:
    """log p = u: increases without bound, so no optimum exists."""

    dimension = 1

    def log_density(self, u):
        return float(u[0])

    def log_density_and_gradient(self, u):
        return float(u[0]), np.array([1.0])


def test_a_density_without_a_maximum_is_refused():
    with pytest.raises(ModeNotFound):
        laplace(NoMaximum(), np.random.default_rng(0))
