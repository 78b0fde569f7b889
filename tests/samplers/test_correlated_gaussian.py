"""A 100-dimensional Gaussian with strong correlations: dense versus diagonal metric (NUTS).

The covariance is AR(1)-style, S_ij = 0.9^|i-j|: unit variances, so a diagonal metric cannot help,
and eigenvalues from (1-rho)/(1+rho) to (1+rho)/(1-rho) (about 1/19 to 19; the spectrum of the
AR(1) correlation matrix, common practice), so a dense metric should remove most of the difficulty.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.samplers.targets import Gaussian
from worker.diagnostics import bulk_ess
from worker.samplers import Chain, ChainOutput, SamplerSettings

DIMENSION = 100
RHO = 0.9


def ar_covariance() -> np.ndarray:
    lags = np.abs(np.subtract.outer(np.arange(DIMENSION), np.arange(DIMENSION)))
    return RHO**lags


def run(metric: str) -> tuple[ChainOutput, float]:
    target = Gaussian(np.zeros(DIMENSION), ar_covariance())
    out = Chain(target, SamplerSettings(preconditioning=metric), np.random.SeedSequence(2024)).run()
    min_ess = min(bulk_ess(out.draws[None, :, i]) for i in range(DIMENSION))
    gradients_per_ess = float(out.stats["gradient_calls"].sum()) / min_ess
    return out, gradients_per_ess


@pytest.mark.slow
def test_dense_metric_recovers_covariance_and_saves_gradients() -> None:
    """The adapted dense inverse metric is close to S; dense needs far fewer gradients per ESS.

    Expected size of the error: for n independent draws the sample covariance satisfies
    E||S_hat - S||_F^2 = (||S||_F^2 + tr(S)^2) / n (Wishart variances Var(S_ij) = (S_ij^2 +
    S_ii S_jj) / n; Anderson 2003, An Introduction to Multivariate Statistical Analysis, ch. 7,
    from memory). With the final 400-draw window of the default warm-up this is about 0.17 in
    relative Frobenius norm; we allow twice that for autocorrelation and the shrinkage.
    """
    covariance = ar_covariance()
    dense, dense_cost = run("full")
    diagonal, diagonal_cost = run("per_coordinate")
    print(
        f"gradient evaluations per effective draw (minimum bulk-ESS over 100 coordinates): "
        f"diagonal {diagonal_cost:.1f}, dense {dense_cost:.1f}, "
        f"ratio {diagonal_cost / dense_cost:.1f}"
    )
    estimate = np.array(dense.adapted["covariance"])
    window = 400
    norm = np.linalg.norm(covariance)
    expected = np.sqrt((norm**2 + np.trace(covariance) ** 2) / window) / norm
    relative_error = np.linalg.norm(estimate - covariance) / norm
    print(f"relative Frobenius error of the dense metric {relative_error:.3f} (iid {expected:.3f})")
    assert relative_error < 2 * expected
    assert diagonal_cost / dense_cost > 3.0
    assert not dense.stats["divergent"].any()
    assert not diagonal.stats["divergent"].any()
