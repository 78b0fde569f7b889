"""E-BFMI (Betancourt 2016, "Diagnosing suboptimal cotangent disintegrations in Hamiltonian Monte
Carlo", arXiv:1604.00695, section 6): estimator sum (E_n - E_{n-1})^2 / sum (E_n - mean E)^2.

Known values, derived here from that estimator:
- exact HMC on a d-dimensional standard normal with integration time pi/2 maps (q, p) to (p, -q),
  so the energy of iteration n is (|p_{n-1}|^2 + |p_n|^2) / 2 with fresh momenta p_n: an MA(1) of
  iid terms a_n, where Var(E_n - E_{n-1}) = Var(a_n - a_{n-2}) = 2 Var(a) = Var(E_n): E-BFMI -> 1,
  the ideal case;
- energies that follow an AR(1) with coefficient phi: E[(E_n - E_{n-1})^2] = 2 (1 - phi) Var(E), so
  E-BFMI -> 2 (1 - phi); phi = 0.95 gives 0.1, below the 0.3 warning level of common practice;
- a random walk of energies (the energy never forgets): E-BFMI -> 0 at rate O(1 / N).
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from worker.diagnostics import ebfmi

CHAINS = 40
DRAWS = 1000


def _within_4_se(values: np.ndarray, expected: float) -> bool:
    return abs(values.mean() - expected) < 4.0 * values.std(ddof=1) / np.sqrt(values.size)


def test_exact_hmc_on_a_gaussian_gives_ebfmi_near_one() -> None:
    rng = np.random.default_rng(1)
    d = 10
    momenta = rng.standard_normal((CHAINS, DRAWS + 1, d))
    half_squares = 0.5 * np.sum(momenta**2, axis=2)
    # the position at the start of iteration n is the momentum drawn at iteration n - 1
    energies = half_squares[:, :-1] + half_squares[:, 1:]
    values = np.array([ebfmi(e) for e in energies])
    assert _within_4_se(values, 1.0)
    assert values.min() > 0.3


def test_ar1_energies_give_two_times_one_minus_phi() -> None:
    rng = np.random.default_rng(2)
    phi = 0.95
    noise = rng.standard_normal((CHAINS, DRAWS))
    noise[:, 0] /= np.sqrt(1.0 - phi**2)
    energies = 50.0 + signal.lfilter([1.0], [1.0, -phi], noise, axis=1)
    values = np.array([ebfmi(e) for e in energies])
    assert _within_4_se(values, 2.0 * (1.0 - phi))
    assert values.max() < 0.3


def test_random_walk_energies_give_a_very_low_ebfmi() -> None:
    rng = np.random.default_rng(3)
    energies = 100.0 + np.cumsum(rng.standard_normal((CHAINS, DRAWS)), axis=1)
    values = np.array([ebfmi(e) for e in energies])
    assert values.max() < 0.1


def test_independent_energies_give_two() -> None:
    """Independent energies (an impossible ideal: even exact HMC keeps half the energy) give
    E[(E_n - E_{n-1})^2] = 2 Var(E), so E-BFMI -> 2; here iid Gamma(5, 1) energies."""
    rng = np.random.default_rng(4)
    values = np.array([ebfmi(e) for e in rng.gamma(5.0, size=(CHAINS, DRAWS))])
    assert _within_4_se(values, 2.0)


def test_degenerate_energies_give_nan() -> None:
    assert np.isnan(ebfmi(np.full(100, 3.0)))
    assert np.isnan(ebfmi(np.array([1.0, 2.0])))
    assert np.isnan(ebfmi(np.array([1.0, np.nan, 2.0, 3.0])))
