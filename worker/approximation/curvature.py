"""The Hessian of a log density, by central differences of its exact gradient.

Step h_j = eps^(1/3) max(1, |u_j|) balances the O(h^2) truncation error of central differences
against the O(eps / h) rounding error (Nocedal & Wright 2006, Numerical Optimization, section 8.1;
common practice). The result is symmetrised, since only rounding makes the two halves differ.
"""

from __future__ import annotations

import numpy as np

from .mode import Target

STEP = np.finfo(float).eps ** (1.0 / 3.0)


def hessian(target: Target, u: np.ndarray) -> np.ndarray:
    """d^2 log p / du du^T at u (2 d gradient calls); NaN entries where the gradient is not
    finite on either side."""
    d = u.shape[0]
    h = STEP * np.maximum(1.0, np.abs(u))
    columns = np.empty((d, d))
    for j in range(d):
        step = np.zeros(d)
        step[j] = h[j]
        up = target.log_density_and_gradient(u + step)
        down = target.log_density_and_gradient(u - step)
        if not (np.isfinite(up[0]) and np.isfinite(down[0])):
            columns[:, j] = np.nan
            continue
        columns[:, j] = (up[1] - down[1]) / (2.0 * h[j])
    return 0.5 * (columns + columns.T)


def covariance_from_hessian(h: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """(covariance, a factor A with A A^T = covariance) for covariance = (-H)^-1, or None when -H
    is not positive definite (not a maximum, or a direction without curvature)."""
    if not np.all(np.isfinite(h)):
        return None
    try:
        precision_factor = np.linalg.cholesky(-h)
    except np.linalg.LinAlgError:
        return None
    # -H = P P^T, so (-H)^-1 = P^-T P^-1 and A = P^-T.
    factor = np.linalg.solve(precision_factor, np.eye(h.shape[0])).T
    return factor @ factor.T, factor
