"""Central finite differences built from scipy.optimize.approx_fprime.

approx_fprime takes one-sided steps; the mean of a forward step (+h) and a backward step (-h) is the
central difference (f(x+h) - f(x-h)) / 2h, whose error is O(h^2) rather than O(h) (common practice;
e.g. Nocedal & Wright 2006, Numerical Optimization, section 8.1).
"""

from collections.abc import Callable

import numpy as np
from scipy.optimize import approx_fprime

STEP = 1e-6


def central_gradient(f: Callable[[np.ndarray], float], x: np.ndarray,
                     step: float = STEP) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    forward = approx_fprime(x, f, step)
    backward = approx_fprime(x, f, -step)
    return (forward + backward) / 2.0


def assert_gradient_close(analytic: np.ndarray, numeric: np.ndarray, scale: float = 1.0,
                          rtol: float = 1e-5, atol: float = 1e-6) -> None:
    """Relative agreement, with an absolute floor proportional to the function's size: rounding in
    f(x +- h) contributes about eps * |f| / h to each numeric component."""
    np.testing.assert_allclose(analytic, numeric, rtol=rtol, atol=atol * max(1.0, scale))
