"""Simulated series with known autocorrelation for the diagnostics tests."""

from __future__ import annotations

import numpy as np
from scipy import signal


def ar1(rng: np.random.Generator, rho: float, shape: tuple[int, ...]) -> np.ndarray:
    """Stationary AR(1) series x_t = rho x_{t-1} + e_t, e_t ~ N(0, 1), along the last axis.

    The first value is drawn from the stationary law N(0, 1 / (1 - rho^2)) so there is no burn-in.
    """
    noise = rng.standard_normal(shape)
    noise[..., 0] /= np.sqrt(1.0 - rho**2)
    return signal.lfilter([1.0], [1.0, -rho], noise, axis=-1)
