"""E-BFMI, the energy Bayesian fraction of missing information (Betancourt 2016, section 6).

E-BFMI = sum_n (E_n - E_{n-1})^2 / sum_n (E_n - mean E)^2 over one chain's Hamiltonian energies:
how much of the spread of the energy one momentum refresh can move. Values below about 0.3 are a
warning in common practice: the chain explores the energy levels too slowly, often in heavy tails.
"""

from __future__ import annotations

import numpy as np


def ebfmi(energy: np.ndarray) -> float:
    """E-BFMI of one chain's energies; NaN with fewer than three draws or non-finite energies."""
    e = np.asarray(energy, dtype=np.float64).ravel()
    if e.size < 3 or not np.isfinite(e).all():
        return float("nan")
    spread = np.sum((e - e.mean()) ** 2)
    if spread == 0.0:
        return float("nan")
    return float(np.sum(np.diff(e) ** 2) / spread)
