"""Monte Carlo standard errors by non-overlapping batch means, for checking draws against truth.

Batch means with batches of about sqrt(n) draws per chain is common practice (Flegal & Jones 2010,
Batch means and spectral variance estimators in MCMC, Annals of Statistics 38(2); from memory).
Kept separate from worker.diagnostics on purpose, so the sampler tests do not rely on the code the
diagnostics tests check.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

TOLERANCE_MCSE = 4.0


def batch_means_se(values: np.ndarray) -> float:
    """Standard error of the grand mean of ``values`` (chains, draws)."""
    chains, n = values.shape
    size = max(1, int(np.sqrt(n)))
    batches = n // size
    means = values[:, : batches * size].reshape(chains, batches, size).mean(axis=2).ravel()
    return float(means.std(ddof=1) / np.sqrt(means.size))


def compare_with(draws: np.ndarray, truth: stats.rv_continuous, label: str) -> list[str]:
    """Every disagreement (beyond 4 MCSE) of mean, sd and 5/50/95% quantiles with ``truth``.

    ``draws`` is (chains, draws) for one quantity. The sd's MCSE is the variance's batch-means
    error by the delta method, se(sd) = se(var) / (2 sd); a quantile's is the error of the
    indicator mean 1{x <= q_p} divided by the true density at q_p (delta method; common practice).
    """
    failures = []
    mean = float(draws.mean())
    checks = [("mean", mean, float(truth.mean()), batch_means_se(draws))]
    centred_sq = (draws - mean) ** 2
    sd = float(np.sqrt(centred_sq.mean()))
    checks.append(("sd", sd, float(truth.std()), batch_means_se(centred_sq) / (2.0 * sd)))
    for p in (0.05, 0.5, 0.95):
        q_true = float(truth.ppf(p))
        se = batch_means_se((draws <= q_true).astype(np.float64)) / float(truth.pdf(q_true))
        checks.append((f"q{p:g}", float(np.quantile(draws, p)), q_true, se))
    for name, estimate, expected, se in checks:
        if not se > 0 or abs(estimate - expected) > TOLERANCE_MCSE * se:
            failures.append(
                f"{label} {name}: {estimate:.4f} vs {expected:.4f} (MCSE {se:.4f}, "
                f"{abs(estimate - expected) / se if se > 0 else np.inf:.1f} MCSE off)"
            )
    return failures
