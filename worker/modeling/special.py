"""Numerically stable elementary functions shared by the distributions and transforms."""

from __future__ import annotations

import numpy as np
from scipy.special import expit, log_expit

__all__ = ["expit", "log_expit", "softplus", "log_sum_exp", "softmax"]

LOG_2PI = float(np.log(2.0 * np.pi))
LOG_PI = float(np.log(np.pi))
LOG_2 = float(np.log(2.0))


def softplus(v: np.ndarray) -> np.ndarray:
    """log(1 + exp(v)) without overflow for large v or loss of precision for very negative v."""
    return -log_expit(-v)


def log_sum_exp(v: np.ndarray) -> np.ndarray:
    """log(sum(exp(v))) over the last axis, shifted by the maximum so no term overflows."""
    top = np.max(v, axis=-1, keepdims=True)
    # an all -inf row would give nan from -inf - -inf; shift by zero there instead
    top = np.where(np.isfinite(top), top, 0.0)
    return np.log(np.sum(np.exp(v - top), axis=-1)) + top[..., 0]


def softmax(v: np.ndarray) -> np.ndarray:
    """exp(v) normalised over the last axis, computed from the shifted exponentials."""
    top = np.max(v, axis=-1, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    e = np.exp(v - top)
    return e / np.sum(e, axis=-1, keepdims=True)
