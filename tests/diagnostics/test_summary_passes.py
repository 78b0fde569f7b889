"""A summary read a quantity at a time equals the summary of the array, to the last bit, at any
pass size: the service's finishing step streams draws (service/stored_draws.py) while the
in-process runner holds them, and a job's summary must not depend on which one made it.

The reference is the array path itself (whose records tests/diagnostics/test_verdict.py checks
against the one-quantity functions); the draws are an AR(1) series with a constant column and a
NaN, so the notes' paths are covered as well.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from worker.diagnostics import summarize
from worker.diagnostics import summary as summary_module


class Streamed:
    """QuantityDraws over an array: each quantity handed out as a fresh contiguous copy."""

    def __init__(self, values: np.ndarray):
        self.values = values
        self.shape = values.shape
        self.reads: list[int] = []

    def quantity(self, index: int) -> np.ndarray:
        self.reads.append(index)
        return np.ascontiguousarray(self.values[:, :, index])


def draws() -> np.ndarray:
    rng = np.random.default_rng(8)
    x = np.zeros((3, 2000, 9))
    noise = rng.normal(size=x.shape)
    for t in range(1, x.shape[1]):
        x[:, t] = 0.6 * x[:, t - 1] + noise[:, t]
    x[:, :, 4] = 2.5
    x[1, 10, 7] = np.nan
    return x


@pytest.mark.parametrize("cells", [1, 6000, 18_000, 10**9])
def test_streamed_and_array_summaries_are_identical_at_any_pass_size(cells, monkeypatch) -> None:
    values = draws()
    names = [f"x[{i + 1}]" for i in range(values.shape[2])]
    reference = json.dumps(summarize(values, names))
    monkeypatch.setattr(summary_module, "CELLS_PER_PASS", cells)
    streamed = Streamed(values)
    assert json.dumps(summarize(streamed, names)) == reference
    assert json.dumps(summarize(values, names)) == reference
    assert streamed.reads == list(range(values.shape[2]))  # each quantity read once, in order
