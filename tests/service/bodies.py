"""Submissions used by the service tests: a normal mean with known variance.

Closed form (Gelman et al. 2013, Bayesian Data Analysis 3rd ed., section 2.5, "Estimating a normal
mean with known variance"): with prior mu ~ N(m0, s0^2) and y_i ~ N(mu, sigma^2), the posterior is
normal with precision 1/s0^2 + n/sigma^2 and mean (m0/s0^2 + sum(y)/sigma^2) / precision.
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np

Y = [1.0, 2.0, 0.5, 1.5, 1.2, 0.3, 2.2, 1.7]
PRIOR_LOCATION, PRIOR_SCALE, NOISE_SCALE = 0.0, 10.0, 1.0


def normal_mean(
    chains: int = 2, warmup: int = 200, draws: int = 300, seed: int = 20261201, **sampler: Any
) -> dict[str, Any]:
    return {
        "model": {
            "title": "normal mean, known variance",
            "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
            "unknowns": {"mu": {}},
            "priors": [
                {
                    "on": "mu",
                    "distribution": "normal",
                    "arguments": {"location": PRIOR_LOCATION, "scale": PRIOR_SCALE},
                }
            ],
            "likelihood": [
                {
                    "name": "obs",
                    "observed": "y",
                    "distribution": "normal",
                    "arguments": {"location": "mu", "scale": NOISE_SCALE},
                }
            ],
        },
        "data": {"n": len(Y), "y": list(Y)},
        "sampler": {
            "chains": chains,
            "warmup_iterations": warmup,
            "draws": draws,
            "seed": seed,
            **sampler,
        },
        "labels": {"suite": "service"},
    }


def posterior_mean_sd() -> tuple[float, float]:
    """BDA3 section 2.5: the exact posterior mean and sd of mu for the data above."""
    y = np.asarray(Y)
    precision = 1 / PRIOR_SCALE**2 + len(y) / NOISE_SCALE**2
    mean = (PRIOR_LOCATION / PRIOR_SCALE**2 + y.sum() / NOISE_SCALE**2) / precision
    return float(mean), float(precision**-0.5)


def variant(body: dict[str, Any], **changes: Any) -> dict[str, Any]:
    """A deep copy with top-level members replaced."""
    out = copy.deepcopy(body)
    out.update(changes)
    return out
