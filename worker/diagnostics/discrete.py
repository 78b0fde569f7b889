"""Posterior probabilities of the values of integer-valued quantities, and of joint patterns.

A discrete quantity's posterior is a probability per value, not a density: the summary lists the
estimated probability P(x = v) of each value v, the share of pooled draws equal to v. Its Monte
Carlo standard error is that of the mean of the indicator series I(x_t = v):
sqrt(p (1 - p) / ESS), with ESS the basic effective sample size of the indicator (the same
autocorrelation estimator as every other ESS, worker/diagnostics/ess.py; the MCSE of a mean is
sd / sqrt(ESS), BDA3 section 11.5; Vehtari et al. 2021, section 4.3, read quantile errors off
indicator series the same way). An indicator takes two values, and rank normalisation maps two
values affinely, so its rank-normalised (bulk) ESS is the same number.

Sizes are bounded by our own choices:
- ``MAX_LISTED_VALUES`` = 20 values per quantity: when more distinct values were drawn, the 20
  most probable are listed (ties to the smaller value) and the rest is reported as one ``other``
  mass with its own error, so nothing is hidden. Twenty bars still carry readable value labels
  at the width of the page's plots, and a posterior spread over more values than that is read
  better from the quantiles the ordinary summary already gives.
- ``MAX_LISTED_PATTERNS`` = 10 joint patterns per vector, most probable first, plus the ``other``
  mass: the handful of best models a variable-selection analysis reports (George & McCulloch
  1993 read model probabilities as visit frequencies of the chain), at most ten rows.
- ``MAX_PATTERN_ELEMENTS`` = 1000 elements over all vectors a job asks patterns of: a table is
  then at most 10 x 1000 values, about the size of the summary of a few hundred quantities.

A binary quantity (every draw 0 or 1) also gets ``probability_of_one``: for an inclusion
indicator, the posterior inclusion probability. An estimate of exactly 0 or 1 comes from an
indicator that never changed; like a constant quantity's errors elsewhere in the summary its
error is reported as 0, though with S effective draws a probability below about 1 / S cannot be
told from 0.
"""

from __future__ import annotations

from collections.abc import Collection, Sequence
from dataclasses import dataclass

import numpy as np

from worker.diagnostics.ess import ess_batch
from worker.diagnostics.splitting import MIN_DRAWS_PER_CHAIN

MAX_LISTED_VALUES = 20
MAX_LISTED_PATTERNS = 10
MAX_PATTERN_ELEMENTS = 1000
# indicator series handled per vectorised ESS pass (cells of (series, chains, draws))
CELLS_PER_PASS = 2_000_000


def _json(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


@dataclass(frozen=True)
class _Estimate:
    """A probability estimated as the mean of an indicator series."""

    probability: float
    ess: float  # NaN: the indicator never changed, or too few draws

    def record(self, enough_draws: bool) -> dict:
        p = self.probability
        if not enough_draws:
            error = None
        elif p in (0.0, 1.0):
            # the indicator is constant: no variation to estimate an error from (module docstring)
            error = 0.0
        else:
            error = _json(np.sqrt(p * (1.0 - p) / self.ess))
        return {"probability": p, "error": error, "ess": _json(self.ess)}


def _indicator_ess(series: list[np.ndarray]) -> np.ndarray:
    """Basic ESS of each boolean ``(chains, draws)`` indicator, in bounded vectorised passes."""
    if not series:
        return np.empty(0)
    cells = series[0].size
    per_pass = max(1, CELLS_PER_PASS // max(1, cells))
    out = [
        ess_batch(np.stack(series[i : i + per_pass]).astype(np.float64))
        for i in range(0, len(series), per_pass)
    ]
    return np.concatenate(out)


def _listed(counts: np.ndarray, limit: int) -> np.ndarray:
    """Positions of the ``limit`` largest counts, ties to the earlier position (the smaller
    value or pattern, since the distinct values come sorted), returned in ascending order."""
    if counts.size <= limit:
        return np.arange(counts.size)
    order = np.argsort(-counts, kind="stable")
    return np.sort(order[:limit])


@dataclass
class _Table:
    """One quantity's distinct values, which are listed, and where its indicators sit."""

    values: np.ndarray
    counts: np.ndarray
    listed: np.ndarray
    first: int  # index of its first indicator in the shared list
    has_other: bool
    share_one: bool  # two values: the second indicator is the complement of the first


def value_tables(
    draws: np.ndarray, names: Sequence[str], integer_names: Collection[str]
) -> dict[str, dict]:
    """Per integer-valued quantity of ``draws`` ``(chains, draws, quantities)``, its record
    ``{"distinct_values", "values": [{"value", "probability", "error", "ess"}], "other",
    "probability_of_one"}`` (module docstring). Quantities with a non-finite draw get none."""
    values = np.asarray(draws, dtype=np.float64)
    chains, n, _ = values.shape
    total = chains * n
    enough = n >= MIN_DRAWS_PER_CHAIN
    wanted = [i for i, name in enumerate(names) if name in integer_names]
    tables: dict[int, _Table] = {}
    indicators: list[np.ndarray] = []
    for column in wanted:
        x = values[:, :, column]
        if not np.isfinite(x).all():
            continue
        whole = np.rint(x).astype(np.int64)
        distinct, counts = np.unique(whole, return_counts=True)
        listed = _listed(counts, MAX_LISTED_VALUES)
        has_other = listed.size < distinct.size
        share_one = distinct.size == 2
        tables[column] = _Table(distinct, counts, listed, len(indicators), has_other, share_one)
        chosen = distinct[listed[:1]] if share_one else distinct[listed]
        indicators.extend(whole == v for v in chosen)
        if has_other:
            indicators.append(~np.isin(whole, distinct[listed]))
    ess = _indicator_ess(indicators)
    records: dict[str, dict] = {}
    for column, table in tables.items():
        k = table.listed.size
        spots = [table.first] * k if table.share_one else list(range(table.first, table.first + k))
        rows = []
        for j, spot in zip(table.listed, spots, strict=True):
            estimate = _Estimate(float(table.counts[j]) / total, float(ess[spot]))
            rows.append({"value": int(table.values[j]), **estimate.record(enough)})
        other = None
        if table.has_other:
            mass = float(table.counts.sum() - table.counts[table.listed].sum()) / total
            other = {
                **_Estimate(mass, float(ess[table.first + k])).record(enough),
                "distinct_values": int(table.values.size - k),
            }
        binary = bool(np.isin(table.values, (0, 1)).all())
        one = next((r for r in rows if r["value"] == 1), None)
        if binary and one is None:
            one = {"probability": 0.0, "error": 0.0 if enough else None, "ess": None}
        records[names[column]] = {
            "distinct_values": int(table.values.size),
            "values": rows,
            "other": other,
            "probability_of_one": (
                {key: one[key] for key in ("probability", "error", "ess")} if binary else None
            ),
        }
    return records


def flat_members(name: str, names: Sequence[str]) -> list[int]:
    """Column positions of quantity ``name``: the scalar itself, or every ``name[...]`` element."""
    prefix = name + "["
    return [i for i, column in enumerate(names) if column == name or column.startswith(prefix)]


def pattern_table(draws: np.ndarray, name: str, names: Sequence[str]) -> dict:
    """The joint posterior of the integer vector ``name``: its most probable patterns.

    ``draws`` is ``(chains, draws, quantities)`` with columns ``names``. Returns ``{"name",
    "elements", "distinct_patterns", "patterns": [{"values", "probability", "error", "ess"}]
    (most probable first; for a binary vector each row also names the elements equal to 1,
    ``included``), "other", "binary", "inclusion"}``; ``inclusion`` is, for a binary vector, each
    element's posterior probability of 1 with its error (else None).
    """
    columns = flat_members(name, names)
    if not columns:
        raise ValueError(f"no quantity named {name!r}")
    values = np.asarray(draws, dtype=np.float64)[:, :, columns]
    chains, n, width = values.shape
    if not np.isfinite(values).all():
        raise ValueError(f"{name} has draws that are not finite numbers")
    total = chains * n
    enough = n >= MIN_DRAWS_PER_CHAIN
    rows = np.rint(values).astype(np.int64).reshape(total, width)
    distinct, inverse, counts = np.unique(
        rows, axis=0, return_inverse=True, return_counts=True
    )
    inverse = inverse.reshape(chains, n)
    listed = _listed(counts, MAX_LISTED_PATTERNS)
    # most probable first; equal probabilities keep the patterns' sorted order
    listed = listed[np.argsort(-counts[listed], kind="stable")]
    has_other = listed.size < distinct.shape[0]
    elements = [names[c] for c in columns]
    binary = bool(np.isin(distinct, (0, 1)).all())
    indicators = [inverse == j for j in listed]
    if has_other:
        indicators.append(~np.isin(inverse, listed))
    if binary:
        indicators.extend(rows[:, e].reshape(chains, n) == 1 for e in range(width))
    ess = _indicator_ess(indicators)
    patterns = []
    for spot, j in enumerate(listed):
        row = {
            "values": [int(v) for v in distinct[j]],
            **_Estimate(float(counts[j]) / total, float(ess[spot])).record(enough),
        }
        if binary:
            row["included"] = [elements[e] for e in np.flatnonzero(distinct[j] == 1)]
        patterns.append(row)
    k = listed.size
    other = None
    if has_other:
        mass = float(counts.sum() - counts[listed].sum()) / total
        other = {
            **_Estimate(mass, float(ess[k])).record(enough),
            "distinct_patterns": int(distinct.shape[0] - k),
        }
    inclusion = None
    if binary:
        start = k + int(has_other)
        shares = (rows == 1).mean(axis=0)
        inclusion = [
            {"name": elements[e],
             **_Estimate(float(shares[e]), float(ess[start + e])).record(enough)}
            for e in range(width)
        ]
    return {
        "name": name,
        "elements": elements,
        "distinct_patterns": int(distinct.shape[0]),
        "patterns": patterns,
        "other": other,
        "binary": binary,
        "inclusion": inclusion,
    }
