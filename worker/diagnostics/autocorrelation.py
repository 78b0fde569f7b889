"""Autocorrelation by FFT and Geyer's (1992) initial monotone sequence estimator.

The multi-chain combination of autocorrelations follows BDA3 section 11.4 and Vehtari et al.
(2021), section 3.2: the within-chain autocovariances are averaged and set against the
between-chain variance, so chains that disagree lower the effective sample size.
"""

from __future__ import annotations

import numpy as np
from scipy import fft


def autocovariance(x: np.ndarray) -> np.ndarray:
    """Autocovariance at every lag of every chain, ``(..., n)`` -> ``(..., n)``, divisor n.

    Zero-padding to at least twice the length turns the FFT's circular correlation into the
    ordinary one (the wrapped part only meets zeros).
    """
    n = x.shape[-1]
    centred = x - x.mean(axis=-1, keepdims=True)
    size = fft.next_fast_len(2 * n, real=True)
    spectrum = fft.rfft(centred, n=size, axis=-1)
    acov = fft.irfft(spectrum * np.conj(spectrum), n=size, axis=-1)[..., :n]
    return acov / n


def combined_autocorrelation(x: np.ndarray) -> np.ndarray:
    """Autocorrelation of the pooled chains at each lag: ``(q, m, n)`` -> ``(q, n)``.

    rho_t = 1 - (W - mean_m(s_m^2 rho_{t,m})) / var_plus, with W the mean within-chain variance and
    var_plus = (n - 1) / n * W + B / n (Vehtari et al. 2021, eq. for rho-hat_t).
    """
    _, m, n = x.shape
    acov = autocovariance(x)
    chain_var = acov[..., 0] * n / (n - 1.0)
    within = chain_var.mean(axis=1)
    between_over_n = x.mean(axis=2).var(axis=1, ddof=1) if m > 1 else np.zeros(x.shape[0])
    var_plus = (n - 1.0) / n * within + between_over_n
    # s_m^2 * rho_{t,m} = s_m^2 * acov_t / acov_0 = acov_t * n / (n - 1)
    mean_scaled = (acov * (n / (n - 1.0))).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1.0 - (within[:, np.newaxis] - mean_scaled) / var_plus[:, np.newaxis]


def integrated_time(rho: np.ndarray) -> np.ndarray:
    """Integrated autocorrelation time tau from autocorrelations ``(q, n)`` -> ``(q,)``.

    Geyer (1992) section 3.3: sums of adjacent pairs P_k = rho_2k + rho_2k+1 are positive and
    decreasing for a reversible chain, so the sum stops at the first non-positive pair (initial
    positive sequence) and each pair is capped by the one before (initial monotone sequence);
    tau = -1 + 2 * sum_k P_k.
    """
    q, n = rho.shape
    pairs = n // 2
    paired = rho[:, : 2 * pairs].reshape(q, pairs, 2).sum(axis=2)
    keep = np.cumprod(paired > 0.0, axis=1).astype(bool)
    monotone = np.minimum.accumulate(np.where(keep, paired, np.inf), axis=1)
    monotone = np.where(keep, monotone, 0.0)
    return -1.0 + 2.0 * monotone.sum(axis=1)
