"""Convergence diagnostics, per-quantity summaries and the quality verdict (pure numpy/scipy)."""

from worker.diagnostics.energy import ebfmi
from worker.diagnostics.ess import bulk_ess, ess, quantile_ess, tail_ess
from worker.diagnostics.mcse import mean_error, quantile_error, sd_error
from worker.diagnostics.rhat import classic_split_rhat, split_rhat
from worker.diagnostics.sampler_report import sampler_checks
from worker.diagnostics.summary import summarize
from worker.diagnostics.thresholds import DEFAULT_THRESHOLDS, check_thresholds, resolve_thresholds
from worker.diagnostics.verdict import verdict

__all__ = [
    "DEFAULT_THRESHOLDS",
    "bulk_ess",
    "check_thresholds",
    "classic_split_rhat",
    "ebfmi",
    "ess",
    "mean_error",
    "quantile_error",
    "sd_error",
    "quantile_ess",
    "resolve_thresholds",
    "sampler_checks",
    "split_rhat",
    "summarize",
    "tail_ess",
    "verdict",
]
