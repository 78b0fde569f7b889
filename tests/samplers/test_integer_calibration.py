"""Simulation-based calibration of the compound sampler: one integer and two continuous unknowns.

Talts, Betancourt, Simpson, Vehtari & Gelman (2018), Validating Bayesian inference algorithms
with simulation-based calibration, arXiv:1804.06788, Algorithm 1: draw the unknowns from the
prior, data from the model, then L posterior draws; the rank of each true value among its draws
is uniform on 0..L when the sampler is right (their Theorem 1). For the integer unknown, ties
with the true value are broken uniformly at random, which keeps the rank uniform (common
practice for discrete parameters).

Model, per group g (GROUPS independent groups in one job, so one chain yields GROUPS
calibration units of each unknown): a_g, b_g ~ N(0, 1); k_g uniform on {1, 2, 3} (categorical,
equal weights); three observations y1 ~ N(a + b, 0.5), y2 ~ N(a - b, 0.5), y3 ~ N(a + k, 0.5).
The integer k_g is drawn by the Gibbs sweep (the groups' indicators are conditionally independent,
weighed together), a and b by NUTS. Each replicate runs one chain with a warm-up of 150 and keeps
every third of 147 draws (L = 49; thinned because NUTS draws are antithetic, as in
tests/samplers/test_calibration_power.py).

Statistic: u = (rank + V) / (L + 1), V ~ U(0, 1), z = Phi^-1(u), so z ~ N(0, 1) under
calibration. Checked, as one Bonferroni family at level 0.01: mean z = 0 and mean z^2 = 1 for the
continuous unknowns (a and b pooled) and for k, each with its standard error from the spread of
the per-replicate means over replicates (so dependence within a replicate is included).

Power: z^2 has variance 2, so with R replicates of 2 x GROUPS continuous units se(mean z^2) ~
sqrt(2 / (2 GROUPS R)) = 0.0056 at GROUPS = 400, R = 64; a 2 % sd error moves mean z^2 by about
0.034 with L = 49 (measured in tests/samplers/test_calibration_power.py), 6.1 se, above the 5.35
needed (3.02 for 4 checks at family level 0.01, plus 2.33 for power 0.99). The test measures the
shift itself: it scales the continuous draws by 0.98 and 1.02 about each group's posterior mean
and asserts the shift is at least 5.35 se.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.samplers.quantile_checks import FAMILY_LEVEL, POWER_Z, SD_ERROR
from worker.modeling import compile_model
from worker.samplers import SamplerSettings
from worker.samplers.compound import integer_chain

GROUPS = 400
REPLICATES = 64
KEPT, THIN = 49, 3
NOISE = 0.5
CHECKS = 4
CRITICAL = float(stats.norm.isf(FAMILY_LEVEL / (2 * CHECKS)))
LOCATIONS = {"y1": "a + b", "y2": "a - b", "y3": "a + k"}
SPEC = {
    "likelihood": [{"name": n, "observed": n, "distribution": "normal",
                    "arguments": {"location": text, "scale": NOISE}}
                   for n, text in LOCATIONS.items()],
    "inputs": {"groups": {"type": "integer"},
               **{n: {"type": "real", "shape": ["groups"]} for n in LOCATIONS}},
    "unknowns": {"a": {"shape": ["groups"]}, "b": {"shape": ["groups"]},
                 "k": {"type": "integer", "shape": ["groups"], "lower": 1, "upper": 3}},
    "priors": [
        {"on": "a", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        {"on": "b", "distribution": "normal", "arguments": {"location": 0, "scale": 1}},
        {"on": "k", "distribution": "categorical", "arguments": {"log_weights": [0, 0, 0]}},
    ],
}


def replicate(seed: np.random.SeedSequence) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """True values (3, GROUPS), kept draws (KEPT, 3, GROUPS) of a, b, k, and the rng for ties."""
    data_seed, chain_seed = seed.spawn(2)
    rng = np.random.default_rng(data_seed)
    a, b = rng.normal(size=GROUPS), rng.normal(size=GROUPS)
    k = rng.integers(1, 4, GROUPS).astype(float)
    noise = NOISE * rng.normal(size=(3, GROUPS))
    data = {"groups": GROUPS, "y1": (a + b + noise[0]).tolist(),
            "y2": (a - b + noise[1]).tolist(), "y3": (a + k + noise[2]).tolist()}
    model = compile_model(SPEC, data, reparametrise=False)
    chain = integer_chain(model, SamplerSettings(warmup_iterations=150, draws=KEPT * THIN),
                          chain_seed)
    points = chain.run().draws[THIN - 1::THIN]
    names = model.unknown_names
    columns = [[names.index(f"{u}[{g + 1}]") for g in range(GROUPS)] for u in ("a", "b", "k")]
    kept = np.stack([points[:, c] for c in columns], axis=1)
    return np.stack([a, b, k]), kept, rng


def z_scores(truth: np.ndarray, draws: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Phi^-1 of the randomised normalised rank of each truth among its draws (axis 0),
    ties broken uniformly at random."""
    below = np.sum(draws < truth, axis=0)
    ties = np.sum(draws == truth, axis=0)
    rank = below + np.floor(rng.random(truth.shape) * (ties + 1))
    return stats.norm.ppf((rank + rng.random(truth.shape)) / (draws.shape[0] + 1))


@pytest.mark.slow
def test_compound_sampler_is_calibrated_with_power_for_a_two_percent_sd_error():
    seeds = np.random.SeedSequence(20261216).spawn(REPLICATES)
    continuous, discrete = [], []
    shifts = {0.98: [], 1.02: []}
    for seed in seeds:
        truth, kept, rng = replicate(seed)
        z = z_scores(truth, kept, rng)
        continuous.append(z[:2].ravel())
        discrete.append(z[2])
        centre = kept[:, :2].mean(axis=0)
        for factor in shifts:
            moved = centre + factor * (kept[:, :2] - centre)
            shifts[factor].append(z_scores(truth[:2], moved, rng).ravel())
    failed = []
    for label, values in (("a, b", np.array(continuous)), ("k", np.array(discrete))):
        for what, statistic, expected in (("mean z", values, 0.0), ("mean z^2", values**2, 1.0)):
            per_replicate = statistic.mean(axis=1)
            se = per_replicate.std(ddof=1) / np.sqrt(REPLICATES)
            score = (per_replicate.mean() - expected) / se
            if abs(score) > CRITICAL:
                failed.append(f"{label} {what}: {per_replicate.mean():.4f} ({score:+.2f} se)")
    assert not failed, failed
    spread = np.array(continuous) ** 2
    se = spread.mean(axis=1).std(ddof=1) / np.sqrt(REPLICATES)
    for factor, values in shifts.items():
        shift = abs(np.mean(np.array(values) ** 2) - spread.mean()) / se
        assert shift >= CRITICAL + POWER_Z, (
            f"a {SD_ERROR:.0%} sd error ({factor}) moves mean z^2 by only {shift:.2f} se")
