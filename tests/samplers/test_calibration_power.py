"""Simulation-based calibration of NUTS with the power to see a 2 % error in a posterior sd.

Talts, Betancourt, Simpson, Vehtari & Gelman (2018), Validating Bayesian inference algorithms
with simulation-based calibration, arXiv:1804.06788, Algorithm 1: draw parameters from the
prior, data from the model, then L posterior draws; the rank of each true parameter among its L
draws is uniform on 0..L when the sampler is right (their Theorem 1), provided the draws are close
to independent (their section 4.1; thinned here).

Model (conjugate, so each replicate is cheap): theta_i ~ N(0, 1) and, for coordinate i, the
mean of n_i observations ybar_i ~ N(theta_i, 1 / n_i), i = 1..200, with n_i from 1 to 100, so the
posterior sds 1 / sqrt(1 + n_i) run from 0.71 to 0.10 and the warm-up must learn the metric
(BDA3 section 2.5: the posterior of a normal mean with known variance). Every replicate runs one
chain with default settings apart from a warm-up of 150 iterations, and keeps every third of
147 draws: NUTS draws of this target are antithetic (measured lag autocorrelations -0.30, +0.11,
-0.04 at lags 1, 2, 3), and a thinning of 2 left a visible excess spread of the ranks.

Statistic: u = (rank + V) / (L + 1) with V ~ U(0, 1) (randomised so u is uniform on (0, 1)
rather than on a grid), z = Phi^-1(u), so z ~ N(0, 1) under calibration. A posterior that is too
narrow by a factor (1 - e) gives z with variance about 1 / (1 - e)^2, 1.04 for e = 0.02, less
with L = 49 draws, whose own noise blurs the ranks (measured: 0.034). Checked, as one
Bonferroni family at level 0.01: mean z = 0 (location) and mean z^2 = 1 (spread), each with its
standard error from the spread of the per-replicate means over replicates (so any dependence
between coordinates of one replicate is included).

Power: z^2 has variance 2, so with R replicates of 200 roughly independent coordinates se(mean
z^2) ~ sqrt(2 / (200 R)) (measured 0.0057 at R = 300); a 2 % sd error moving mean z^2 by 0.034
is then 5.9 se, above the 5.1 needed (critical value 2.8 for 2 checks at family level 0.01,
plus 2.33 for power 0.99). The test measures the shift itself: it scales every replicate's
draws by 0.98 and 1.02 about the exact posterior mean, asserts the shift is at least 5.1 se,
and that those draws fail.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.samplers.quantile_checks import FAMILY_LEVEL, POWER_Z, SD_ERROR
from worker.samplers import Chain, SamplerSettings

COORDINATES = 200
OBSERVATIONS = np.round(np.logspace(0, 2, COORDINATES))
REPLICATES = 300
KEPT = 49
THIN = 3
CHECKS = 2
CRITICAL = float(stats.norm.isf(FAMILY_LEVEL / (2 * CHECKS)))


class NormalMeans:
    """Posterior of theta (200 coordinates) under theta_i ~ N(0, 1), ybar_i ~ N(theta_i, 1/n_i)."""

    dimension = COORDINATES

    def __init__(self, ybar: np.ndarray):
        self.ybar = ybar

    def log_density(self, u: np.ndarray) -> float:
        return self.log_density_and_gradient(u)[0]

    def log_density_and_gradient(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        residual = self.ybar - u
        value = -0.5 * float(u @ u) - 0.5 * float(OBSERVATIONS @ residual**2)
        return value, OBSERVATIONS * residual - u


def _replicate(index: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Truth, thinned posterior draws, exact posterior mean and V of one replicate."""
    rng = np.random.default_rng(np.random.SeedSequence(1804, spawn_key=(index,)))
    theta = rng.standard_normal(COORDINATES)
    ybar = theta + rng.standard_normal(COORDINATES) / np.sqrt(OBSERVATIONS)
    settings = SamplerSettings(warmup_iterations=150, draws=KEPT * THIN)
    out = Chain(NormalMeans(ybar), settings, np.random.SeedSequence(7000 + index)).run()
    posterior_mean = OBSERVATIONS * ybar / (1.0 + OBSERVATIONS)
    return theta, out.draws[THIN - 1 :: THIN], posterior_mean, rng.random(COORDINATES)


def _scores(truth: np.ndarray, draws: np.ndarray, jitter: np.ndarray) -> np.ndarray:
    ranks = np.sum(draws < truth, axis=0)
    return stats.norm.ppf((ranks + jitter) / (KEPT + 1))


def _statistics(z: np.ndarray) -> dict[str, tuple[float, float]]:
    """(estimate - expected, its se) of the location and spread checks over (replicates, coords)."""
    location, spread = z.mean(axis=1), (z**2).mean(axis=1)
    n = z.shape[0]
    return {
        "mean z": (float(location.mean()), float(location.std(ddof=1) / np.sqrt(n))),
        "mean z^2 - 1": (float(spread.mean() - 1.0), float(spread.std(ddof=1) / np.sqrt(n))),
    }


@pytest.mark.slow
def test_ranks_are_calibrated_with_power_against_a_two_percent_sd_error() -> None:
    replicates = [_replicate(i) for i in range(REPLICATES)]

    def scores(factor: float) -> np.ndarray:
        return np.array(
            [
                _scores(truth, mean + factor * (draws - mean), jitter)
                for truth, draws, mean, jitter in replicates
            ]
        )

    found = _statistics(scores(1.0))
    narrow, wide = _statistics(scores(1.0 - SD_ERROR)), _statistics(scores(1.0 + SD_ERROR))
    print({name: f"{d:+.4f} (se {se:.4f})" for name, (d, se) in found.items()})
    for name, (difference, se) in found.items():
        assert abs(difference) <= CRITICAL * se, (name, difference, se)
    spread_se = found["mean z^2 - 1"][1]
    for moved in (narrow, wide):
        shift = abs(moved["mean z^2 - 1"][0] - found["mean z^2 - 1"][0]) / spread_se
        print(f"a 2 % sd error moves mean z^2 by {shift:.2f} se")
        assert shift >= CRITICAL + POWER_Z, f"a 2 % sd error moves mean z^2 by only {shift:.2f} se"
        assert abs(moved["mean z^2 - 1"][0]) > CRITICAL * moved["mean z^2 - 1"][1]
