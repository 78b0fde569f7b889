"""Simulation-based calibration (Talts, Betancourt, Simpson, Vehtari & Gelman 2018, "Validating
Bayesian inference algorithms with simulation-based calibration", arXiv:1804.06788, Algorithm 1).

If parameters are drawn from the prior, data from the model given them, and the posterior is then
sampled correctly, the rank of each true parameter value among L posterior draws is uniform on
0..L (their Theorem 1). Posterior draws are thinned so they are close to independent (their
section 4.1). We test uniformity of the ranks of mu, tau and theta[1] with a chi-square test over
10 equal bins (10 replications expected per bin), each at level 0.01 (so about 0.03 for the
three together). Sizes are modest for time: 100 replications, one chain of 200 warm-up
iterations and 297 draws thinned by 3 to 99.

Power: this test catches gross miscalibration through the runner path (a posterior half as wide
as it should be, test_uniformity_check_rejects_a_miscalibrated_sampler); with 100 replications it
has little power against a 2 % error in a posterior sd, which needs thousands of rank samples.
tests/samplers/test_calibration_power.py has that power (300 replicates of 200 coordinates).

Model, a small hierarchical normal one (non-centred): mu ~ N(0, 1), tau ~ half-normal(1),
eta_j ~ N(0, 1), theta_j = mu + tau eta_j, y_j ~ N(theta_j, 1), j = 1..4. NUTS only.
"""

from __future__ import annotations

import multiprocessing
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest
from scipy import stats

from worker import runner

GROUPS = 4
REPLICATIONS = 100
KEPT_DRAWS = 99  # ranks take the values 0..99: 100 values, 10 per bin
THIN = 3
BINS = 10
LEVEL = 0.01
WATCHED = ("mu", "tau", "theta[1]")

SPEC = {
    "inputs": {"groups": {"type": "integer"}, "y": {"type": "real", "shape": ["groups"]}},
    "unknowns": {"mu": {}, "tau": {"lower": 0}, "eta": {"shape": ["groups"]}},
    "derived": {"theta": "mu + tau * eta"},
    "priors": [
        {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        {"on": "tau", "distribution": "half_normal", "arguments": {"scale": 1}},
        {"on": "eta", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
    ],
    "likelihood": [{"name": "measurement", "observed": "y", "distribution": "normal",
                    "arguments": {"location": "theta", "scale": 1}}],
}  # fmt: skip


def _one_replication(index: int) -> list[int]:
    """Ranks of the true mu, tau and theta[1] among the thinned posterior draws of one data set."""
    rng = np.random.default_rng(np.random.SeedSequence(18040, spawn_key=(index,)))
    mu = rng.normal()
    tau = abs(rng.normal())
    theta = mu + tau * rng.normal(size=GROUPS)
    y = rng.normal(theta, 1.0)
    truth = {"mu": mu, "tau": tau, "theta[1]": theta[0]}
    outcome = runner.run_in_process(
        {
            "model": SPEC,
            "data": {"groups": GROUPS, "y": y.tolist()},
            "sampler": {
                "method": "nuts", "chains": 1, "warmup_iterations": 200,
                "draws": KEPT_DRAWS * THIN, "seed": 1000 + index,
            },
        }
    )  # fmt: skip
    names = outcome["names"]
    kept = outcome["draws"][0, THIN - 1 :: THIN]
    return [int(np.sum(kept[:, names.index(name)] < truth[name])) for name in WATCHED]


def rank_statistics() -> np.ndarray:
    """(replications, watched quantities) ranks, computed on two processes."""
    # Spawned, not forked: by this point the test process holds threads of earlier tests (log
    # writers, HTTP clients), and a forked child can inherit one of their locks held and hang.
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=2, mp_context=context) as pool:
        return np.array(list(pool.map(_one_replication, range(REPLICATIONS))))


def uniformity_p_value(ranks: np.ndarray) -> float:
    """Chi-square test of ranks 0..KEPT_DRAWS against a discrete uniform, in BINS equal bins."""
    counts = np.bincount(ranks * BINS // (KEPT_DRAWS + 1), minlength=BINS)
    return float(stats.chisquare(counts).pvalue)


def test_uniformity_check_rejects_a_miscalibrated_sampler() -> None:
    """The test must have power: ranks from a posterior that is too narrow pile up at both ends
    (Talts et al. 2018, figure of a histogram for an underdispersed posterior)."""
    rng = np.random.default_rng(1)
    truth = rng.normal(size=REPLICATIONS)
    draws = rng.normal(scale=0.5, size=(REPLICATIONS, KEPT_DRAWS))  # half as wide as it should be
    ranks = np.sum(draws < truth[:, None], axis=1)
    assert uniformity_p_value(ranks) < LEVEL


@pytest.mark.slow
def test_ranks_of_true_parameters_are_uniform() -> None:
    ranks = rank_statistics()
    assert ranks.min() >= 0 and ranks.max() <= KEPT_DRAWS
    p_values = {name: uniformity_p_value(ranks[:, i]) for i, name in enumerate(WATCHED)}
    assert all(p > LEVEL for p in p_values.values()), p_values
