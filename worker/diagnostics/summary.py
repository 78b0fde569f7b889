"""Per-quantity posterior summary: location, spread, quantiles, their Monte Carlo standard
errors, bulk- and tail-ESS and R-hat, as JSON-able records (undefined values are None)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from worker.diagnostics.ess import TAIL_PROBABILITIES, bulk_ess_batch, quantile_ess_batch
from worker.diagnostics.mcse import mean_error_batch, quantile_error_batch, sd_error_batch
from worker.diagnostics.rhat import split_rhat_batch
from worker.diagnostics.splitting import MIN_DRAWS_PER_CHAIN

DEFAULT_QUANTILES = (0.05, 0.5, 0.95)
# quantities handled per vectorised pass, bounded so a wide model does not need gigabytes at once
CELLS_PER_PASS = 2_000_000

NOTE_CONSTANT = "constant"
NOTE_NOT_FINITE = "not_finite"
NOTE_TOO_FEW_DRAWS = "too_few_draws"


def quantile_label(p: float) -> str:
    """'5%' for 0.05, '2.5%' for 0.025."""
    return f"{100.0 * p:g}%"


def _json_number(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def _notes(block: np.ndarray) -> list[str | None]:
    q, _, n = block.shape
    flat = block.reshape(q, -1)
    finite = np.isfinite(flat).all(axis=1)
    with np.errstate(invalid="ignore"):
        constant = flat.max(axis=1) == flat.min(axis=1)
    notes: list[str | None] = [NOTE_TOO_FEW_DRAWS if n < MIN_DRAWS_PER_CHAIN else None] * q
    for i in np.flatnonzero(finite & constant):
        notes[i] = NOTE_CONSTANT
    for i in np.flatnonzero(~finite):
        notes[i] = NOTE_NOT_FINITE
    return notes


def summarize(
    draws: np.ndarray, names: Sequence[str], quantiles: Sequence[float] = DEFAULT_QUANTILES
) -> list[dict]:
    """One record per quantity of ``draws`` shaped ``(chains, draws, quantities)``.

    A record holds ``name``, ``mean``, ``sd``, ``quantiles`` and ``quantile_errors`` (keyed
    '5%'...), ``mean_error``, ``sd_error``, ``bulk_ess``, ``tail_ess``, ``rhat`` and ``note``:
    None, or why the diagnostics are None: 'constant' (every draw identical), 'not_finite' (some
    draw is NaN or infinite) or 'too_few_draws' (fewer than four per chain).
    """
    values = np.asarray(draws, dtype=np.float64)
    if values.ndim != 3:
        raise ValueError(f"expected draws shaped (chains, draws, quantities), got {values.shape}")
    chains, n, width = values.shape
    if len(names) != width:
        raise ValueError(f"{len(names)} names for {width} quantities")
    probabilities = [float(p) for p in quantiles]
    labels = [quantile_label(p) for p in probabilities]
    per_pass = max(1, CELLS_PER_PASS // max(1, chains * n))
    records: list[dict] = []
    for start in range(0, width, per_pass):
        block = np.moveaxis(values[:, :, start : start + per_pass], 2, 0)
        records.extend(
            _summarize_block(block, names[start : start + per_pass], probabilities, labels)
        )
    return records


def _summarize_block(
    block: np.ndarray, names: Sequence[str], probabilities: list[float], labels: list[str]
) -> list[dict]:
    q = block.shape[0]
    flat = block.reshape(q, -1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = flat.mean(axis=1)
        sd = flat.std(axis=1, ddof=1) if flat.shape[1] > 1 else np.full(q, np.nan)
        finite = np.isfinite(flat).all(axis=1)
        points = np.quantile(np.where(finite[:, None], flat, 0.0), probabilities, axis=1)
        points[:, ~finite] = np.nan
        enough = block.shape[2] >= MIN_DRAWS_PER_CHAIN
        nan = np.full(q, np.nan)
        mean_error = mean_error_batch(block) if enough else nan
        sd_error = sd_error_batch(block) if enough else nan
        # indicator ESS per probability, shared by the quantile MCSE and tail-ESS (5% and 95%)
        needed = sorted({*probabilities, *TAIL_PROBABILITIES})
        indicator = {p: quantile_ess_batch(block, p) if enough else nan for p in needed}
        mcse_points = [
            quantile_error_batch(block, p, indicator[p]) if enough else nan for p in probabilities
        ]
        bulk = bulk_ess_batch(block) if enough else nan
        tail = np.minimum(*(indicator[p] for p in TAIL_PROBABILITIES))
        rhat = split_rhat_batch(block) if enough else nan
    notes = _notes(block)
    records = []
    for i, name in enumerate(names):
        constant = notes[i] == NOTE_CONSTANT
        records.append(
            {
                "name": name,
                "mean": _json_number(mean[i]),
                "sd": _json_number(sd[i]),
                "quantiles": {lab: _json_number(points[j, i]) for j, lab in enumerate(labels)},
                # a constant quantity is known exactly: its Monte Carlo errors are zero
                "mean_error": 0.0 if constant else _json_number(mean_error[i]),
                "sd_error": 0.0 if constant else _json_number(sd_error[i]),
                "quantile_errors": {
                    lab: 0.0 if constant else _json_number(mcse_points[j][i])
                    for j, lab in enumerate(labels)
                },
                "bulk_ess": _json_number(bulk[i]),
                "tail_ess": _json_number(tail[i]),
                "rhat": _json_number(rhat[i]),
                "note": notes[i],
            }
        )
    return records
