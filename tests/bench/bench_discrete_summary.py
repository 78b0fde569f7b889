"""Discrete tables benchmark: what the value tables of integer-valued quantities add to a
summary, next to the summary itself (worker/diagnostics/discrete.py against summary.py).

Three kinds of integer column, 400 of each, 4 chains of 1000 iid draws: 0/1 (one indicator each:
two values share one ESS), counts with about ten values (Poisson(3): an indicator per value), and
counts with a wide support (Poisson(200): 20 listed values plus the 'other' mass, 21 indicators,
the most the table computes). Each is timed alternately with `summarize` of the same draws, 3
repeats after one to warm up; the figure is the ratio of the medians. Run with `make bench` (or
`python -m tests.bench discrete`).
"""

from __future__ import annotations

import statistics
import time

import numpy as np

from worker.diagnostics import summarize
from worker.diagnostics.discrete import value_tables

COLUMNS, CHAINS, DRAWS = 400, 4, 1000
REPEATS = 3


def _draws(kind: str, rng: np.random.Generator) -> np.ndarray:
    shape = (CHAINS, DRAWS, COLUMNS)
    if kind == "0/1":
        return (rng.random(shape) < 0.3).astype(np.float64)
    mean = 3.0 if kind == "about ten values" else 200.0
    return rng.poisson(mean, shape).astype(np.float64)


def _timed(call) -> float:
    started = time.perf_counter()
    call()
    return time.perf_counter() - started


def main() -> None:
    rng = np.random.default_rng(20261203)
    names = [f"k[{i}]" for i in range(1, COLUMNS + 1)]
    integers = set(names)
    print(f"{COLUMNS} columns, {CHAINS} chains x {DRAWS} draws; tables / summary, medians of "
          f"{REPEATS}")
    for kind in ("0/1", "about ten values", "wide support"):
        draws = _draws(kind, rng)
        summarize(draws, names)
        value_tables(draws, names, integers)
        summary, tables = [], []
        for _ in range(REPEATS):
            summary.append(_timed(lambda d=draws: summarize(d, names)))
            tables.append(_timed(lambda d=draws: value_tables(d, names, integers)))
        ratio = statistics.median(tables) / statistics.median(summary)
        print(f"{kind:>18}: value tables take {ratio:.2f} x the summary's time")


if __name__ == "__main__":
    main()
