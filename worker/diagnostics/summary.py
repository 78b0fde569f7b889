"""Per-quantity posterior summary, as JSON-able records (undefined values are None).

Our own layout: the median and a central interval first (what a reader asks first: where is it,
and how sure are we), then mean and sd, then the diagnostics (R-hat, bulk- and tail-ESS), then
the Monte Carlo errors of the estimates. The interval's level is a job setting (the submission's
``summary.interval``); the default 0.8 is our own choice: wide enough to show the spread, and its
end points, the 10% and 90% quantiles, sit where a few thousand draws still estimate a quantile
well (a sample quantile's variance p(1 - p) / (n f(q)^2) grows as the density f falls into the
tails; common practice).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Protocol, runtime_checkable

import numpy as np

from worker.diagnostics.ess import TAIL_PROBABILITIES, bulk_ess_batch, quantile_ess_batch
from worker.diagnostics.mcse import mean_error_batch, quantile_error_batch, sd_error_batch
from worker.diagnostics.rhat import split_rhat_batch
from worker.diagnostics.splitting import MIN_DRAWS_PER_CHAIN

DEFAULT_INTERVAL = 0.8
# Draws handled per vectorised pass (as many quantities as fit, at least one), bounded so that a
# long or wide job's summary never needs much memory: the diagnostics' temporaries (ranks,
# transforms, sorted copies) are several times a pass. 400,000 float64 draws are 3.2 MB: one
# quantity of 4 chains of 100,000 draws, or 100 quantities of a default job (4 x 1000), which keeps
# the per-pass overhead negligible. The records do not depend on it (every computation is per
# quantity; a test checks identical records at several sizes).
CELLS_PER_PASS = 400_000



@runtime_checkable
class QuantityDraws(Protocol):
    """Draws that are read one quantity at a time (the service's finishing step streams them from
    its store): ``shape`` is (chains, draws, quantities) and ``quantity(j)`` gives quantity j's
    draws, shaped (chains, draws)."""

    @property
    def shape(self) -> tuple[int, int, int]: ...

    def quantity(self, index: int) -> np.ndarray: ...


NOTE_CONSTANT = "constant"
NOTE_NOT_FINITE = "not_finite"
NOTE_TOO_FEW_DRAWS = "too_few_draws"


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


def interval_problem(level: object) -> str | None:
    """Why ``level`` cannot be a central interval's level, or None."""
    number = isinstance(level, int | float) and not isinstance(level, bool)
    if not (number and 0.0 < level < 1.0):
        return f"The interval's level must be a number strictly between 0 and 1, got {level!r}."
    return None


def summarize(
    draws: np.ndarray | QuantityDraws, names: Sequence[str], interval: float = DEFAULT_INTERVAL
) -> list[dict]:
    """One record per quantity of ``draws`` shaped ``(chains, draws, quantities)``, an array or
    a ``QuantityDraws`` (then read a quantity at a time, never whole).

    A record holds, in this order: ``name``; ``median``; ``interval`` (``level``, ``lower`` and
    ``upper``: the central interval's end points, the (1 - level)/2 and (1 + level)/2 quantiles);
    ``mean``; ``sd``; ``rhat``; ``bulk_ess``; ``tail_ess``; the Monte Carlo standard errors
    ``mean_error``, ``sd_error`` and ``quantile_errors`` (``median``, ``lower``, ``upper``); and
    ``note``: None, or why the diagnostics are None: 'constant' (every draw identical),
    'not_finite' (some draw is NaN or infinite) or 'too_few_draws' (fewer than four per chain).
    """
    problem = interval_problem(interval)
    if problem:
        raise ValueError(problem)
    fill: Callable[[np.ndarray, int], None]
    if isinstance(draws, QuantityDraws):
        shape = tuple(draws.shape)

        def fill(block: np.ndarray, start: int) -> None:
            for k in range(block.shape[0]):
                block[k] = draws.quantity(start + k)
    else:
        values = np.asarray(draws, dtype=np.float64)
        shape = values.shape

        def fill(block: np.ndarray, start: int) -> None:
            block[...] = np.moveaxis(values[:, :, start : start + block.shape[0]], 2, 0)

    if len(shape) != 3:
        raise ValueError(f"expected draws shaped (chains, draws, quantities), got {shape}")
    chains, n, width = shape
    if len(names) != width:
        raise ValueError(f"{len(names)} names for {width} quantities")
    level = float(interval)
    probabilities = [0.5, (1.0 - level) / 2.0, (1.0 + level) / 2.0]
    labels = ["median", "lower", "upper"]
    per_pass = max(1, CELLS_PER_PASS // max(1, chains * n))
    records: list[dict] = []
    for start in range(0, width, per_pass):
        # A contiguous (quantities, chains, draws) copy of the pass either way, so an array and
        # the same draws read a quantity at a time give the same records, to the last bit.
        block = np.empty((min(per_pass, width - start), chains, n))
        fill(block, start)
        records.extend(
            _summarize_block(block, names[start : start + per_pass], probabilities, labels, level)
        )
    return records


def _summarize_block(
    block: np.ndarray,
    names: Sequence[str],
    probabilities: list[float],
    labels: list[str],
    level: float,
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
        # over the defined ones, as tail_ess_batch: one constant indicator must not hide the other
        tail = np.fmin(*(indicator[p] for p in TAIL_PROBABILITIES))
        rhat = split_rhat_batch(block) if enough else nan
    notes = _notes(block)
    records = []
    for i, name in enumerate(names):
        constant = notes[i] == NOTE_CONSTANT
        median, lower, upper = (_json_number(points[j, i]) for j in range(3))
        records.append(
            {
                "name": name,
                "median": median,
                "interval": {"level": level, "lower": lower, "upper": upper},
                "mean": _json_number(mean[i]),
                "sd": _json_number(sd[i]),
                "rhat": _json_number(rhat[i]),
                "bulk_ess": _json_number(bulk[i]),
                "tail_ess": _json_number(tail[i]),
                # a constant quantity is known exactly: its Monte Carlo errors are zero
                "mean_error": 0.0 if constant else _json_number(mean_error[i]),
                "sd_error": 0.0 if constant else _json_number(sd_error[i]),
                "quantile_errors": {
                    lab: 0.0 if constant else _json_number(mcse_points[j][i])
                    for j, lab in enumerate(labels)
                },
                "note": notes[i],
            }
        )
    return records
