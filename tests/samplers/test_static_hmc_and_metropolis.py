"""Structural checks of static HMC (Neal 2011, section 5.3.2) and adaptive Metropolis
(Haario, Saksman & Tamminen 2001)."""

from __future__ import annotations

import math

import numpy as np

from tests.samplers.targets import Gaussian, IndependentGaussian
from worker.samplers import Chain, SamplerSettings


def test_hmc_steps_are_integration_time_over_step_size() -> None:
    """Without jitter every iteration takes ceil(T / eps) steps with the one adapted eps; with
    jitter eps varies within +-10% of it."""
    target = IndependentGaussian(np.zeros(3), np.array([1.0, 2.0, 3.0]))
    settings = SamplerSettings(method="hmc", jitter=False, integration_time=2.5, draws=200)
    out = Chain(target, settings, np.random.SeedSequence(1)).run()
    eps = out.adapted["step_size"]
    assert np.all(out.stats["step_size"] == eps)
    assert np.all(out.stats["gradient_calls"] == math.ceil(2.5 / eps))
    jittered = Chain(
        target, SamplerSettings(method="hmc", draws=200), np.random.SeedSequence(1)
    ).run()
    ratio = jittered.stats["step_size"] / jittered.adapted["step_size"]
    assert np.all((ratio >= 0.9) & (ratio <= 1.1)) and ratio.std() > 0.03


def test_metropolis_learns_the_covariance_shape() -> None:
    """Haario et al. (2001): the proposal covariance tracks the target's. With a dense metric the
    learned proposal covariance of a correlated 3-d normal should match it to within sampling
    error (relative Frobenius error below 0.35 from the last 400-draw window; the expected error
    of n independent draws is sqrt((||S||_F^2 + tr(S)^2) / n) / ||S||_F, about 0.075 here, and
    random-walk draws are far from independent)."""
    # sds (2, 1, 0.5), correlations 0.8 and -0.4: eigenvalues about 0.09, 0.46 and 4.7.
    covariance = np.array([[4.0, 1.6, 0.0], [1.6, 1.0, -0.2], [0.0, -0.2, 0.25]])
    target = Gaussian(np.zeros(3), covariance)
    settings = SamplerSettings(method="metropolis", preconditioning="full", draws=100)
    out = Chain(target, settings, np.random.SeedSequence(2)).run()
    learned = np.array(out.adapted["proposal_covariance"])
    error = np.linalg.norm(learned - covariance) / np.linalg.norm(covariance)
    print(f"relative Frobenius error of the learned proposal covariance {error:.3f}")
    assert error < 0.35
    # The scale stays within a factor 2 of the Gaussian optimum 2.38/sqrt(d) (Roberts, Gelman &
    # Gilks 1997) once the shape is right.
    assert 0.5 < out.adapted["proposal_scale"] / (2.38 / np.sqrt(3)) < 2.0
