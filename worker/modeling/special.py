"""Numerically stable elementary functions shared by the distributions and transforms."""

from __future__ import annotations

import numpy as np
from scipy.special import expit, log_expit

__all__ = ["expit", "log_expit", "softplus", "log_sum_exp", "softmax", "max_last", "sum_last"]

LOG_2PI = float(np.log(2.0 * np.pi))
LOG_PI = float(np.log(np.pi))
LOG_2 = float(np.log(2.0))


def softplus(v: np.ndarray) -> np.ndarray:
    """log(1 + exp(v)) without overflow for large v or loss of precision for very negative v."""
    return -log_expit(-v)


# numpy reduces a short last axis of a tall array one row at a time; up to this many columns,
# combining whole columns (or a product with a vector of ones) is many times faster
_SHORT_AXIS = 16


def max_last(v: np.ndarray) -> np.ndarray:
    """Maximum over the last axis."""
    k = v.shape[-1]
    if k > _SHORT_AXIS or v.ndim == 1 or k == 0:
        return np.max(v, axis=-1)
    out = v[..., 0].copy()
    for j in range(1, k):            # a loop over the few columns, not over rows
        np.maximum(out, v[..., j], out=out)
    return out


def sum_last(v: np.ndarray) -> np.ndarray:
    """Sum over the last axis."""
    if v.ndim == 1 or v.shape[-1] > _SHORT_AXIS:
        return np.sum(v, axis=-1)
    return v @ np.ones(v.shape[-1])


def log_sum_exp(v: np.ndarray) -> np.ndarray:
    """log(sum(exp(v))) over the last axis, shifted by the maximum so no term overflows."""
    top = max_last(v)[..., None]
    # an all -inf row would give nan from -inf - -inf; shift by zero there instead
    top = np.where(np.isfinite(top), top, 0.0)
    return np.log(sum_last(np.exp(v - top))) + top[..., 0]


def softmax(v: np.ndarray) -> np.ndarray:
    """exp(v) normalised over the last axis, computed from the shifted exponentials."""
    top = max_last(v)[..., None]
    top = np.where(np.isfinite(top), top, 0.0)
    e = np.exp(v - top)
    return e / sum_last(e)[..., None]
