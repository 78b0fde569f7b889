"""Value-probability and joint-pattern tables of integer draws (worker/diagnostics/discrete.py).

The draws are simulated exactly (iid or a two-state Markov chain), so the true probabilities are
known: scipy.stats pmfs, products of independent Bernoulli probabilities, and for the Monte Carlo
error Var(p-hat) = p (1 - p) tau / N with the two-state chain's tau = (1 - q) / q (derived in
tests/diagnostics/test_discrete_diagnostics.py; the MCSE of a mean is sd / sqrt(ESS), BDA3
section 11.5). These test the summary, not a sampler.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import stats

from tests.diagnostics.test_discrete_diagnostics import two_state_chain
from worker.diagnostics.discrete import (
    MAX_LISTED_PATTERNS,
    MAX_LISTED_VALUES,
    pattern_table,
    value_tables,
)

CHAINS = 4
DRAWS = 1000
TOTAL = CHAINS * DRAWS


def test_reported_error_matches_the_spread_of_estimates_over_replicates() -> None:
    """400 independent replicates of a symmetric two-state chain (flip q = 0.2): the reported
    error of P(x = 1) agrees with the closed form sqrt(p (1 - p) tau / N), p = 1/2, tau = 4, and
    with the sd of the 400 estimates. The sd of 400 estimates has relative sd 1 / sqrt(798),
    3.5%; four of those plus the 3% ESS bias allowance of tests/diagnostics/test_ess.py."""
    rng = np.random.default_rng(16)
    q, replicates = 0.2, 400
    draws = two_state_chain(rng, q, q, (replicates, CHAINS, DRAWS))
    estimates, errors = [], []
    for r in range(replicates):
        table = value_tables(draws[r][..., None], ["z"], {"z"})["z"]["probability_of_one"]
        estimates.append(table["probability"])
        errors.append(table["error"])
    closed_form = np.sqrt(0.25 * ((1.0 - q) / q) / TOTAL)
    tolerance = 4.0 / np.sqrt(2 * (replicates - 1)) + 0.03
    # the mean reported error: four standard errors of the mean of 400, plus the bias allowance
    spread = np.std(errors, ddof=1) / np.sqrt(replicates)
    assert abs(np.mean(errors) - closed_form) < 4 * spread + 0.03 * closed_form
    assert abs(np.std(estimates, ddof=1) / closed_form - 1.0) < tolerance
    assert abs(np.mean(estimates) - 0.5) < 4 * closed_form / np.sqrt(replicates)


def test_a_wide_support_lists_the_most_probable_values_and_the_rest_as_other() -> None:
    """iid Poisson(50) draws: about 60 distinct values, so the 20 most probable are listed in
    increasing order, each within four errors of scipy.stats.poisson.pmf, and the rest is one
    'other' mass that completes the total."""
    rng = np.random.default_rng(50)
    draws = rng.poisson(50.0, (CHAINS, DRAWS, 1)).astype(np.float64)
    record = value_tables(draws, ["count"], {"count"})["count"]
    values = np.array([row["value"] for row in record["values"]])
    assert len(values) == MAX_LISTED_VALUES and np.all(np.diff(values) > 0)
    distinct, counts = np.unique(draws, return_counts=True)
    assert record["distinct_values"] == distinct.size
    # the listed values are the most frequent ones
    assert min(counts[np.isin(distinct, values)]) >= max(counts[~np.isin(distinct, values)])
    for row in record["values"]:
        assert abs(row["probability"] - stats.poisson.pmf(row["value"], 50.0)) < 4 * row["error"]
        assert row["ess"] > 0.8 * TOTAL  # iid: the indicator's ESS is about N
    other = record["other"]
    listed = sum(row["probability"] for row in record["values"])
    assert abs(other["probability"] + listed - 1.0) < 1e-12
    assert other["distinct_values"] == distinct.size - MAX_LISTED_VALUES
    expected_other = 1.0 - stats.poisson.pmf(values, 50.0).sum()
    assert abs(other["probability"] - expected_other) < 4 * other["error"]
    assert record["probability_of_one"] is None


def test_binary_and_edge_cases() -> None:
    """A 0/1 quantity reports its probability of one (0 when 1 never occurs, error 0 as for any
    constant indicator); real quantities and quantities with a non-finite draw get no table;
    with fewer than four draws per chain the errors are undefined."""
    rng = np.random.default_rng(3)
    draws = np.stack(
        [rng.random((CHAINS, DRAWS)) < 0.3, np.zeros((CHAINS, DRAWS)),
         rng.normal(size=(CHAINS, DRAWS)), np.full((CHAINS, DRAWS), 2.0)], axis=-1
    ).astype(np.float64)
    draws[0, 0, 3] = np.nan
    names = ["b", "never", "real", "broken"]
    tables = value_tables(draws, names, {"b", "never", "broken"})
    assert set(tables) == {"b", "never"}
    one = tables["b"]["probability_of_one"]
    assert one == {key: tables["b"]["values"][1][key] for key in ("probability", "error", "ess")}
    assert abs(one["probability"] - 0.3) < 4 * one["error"]
    assert tables["never"]["probability_of_one"] == {"probability": 0.0, "error": 0.0, "ess": None}
    assert tables["never"]["values"] == [{"value": 0, "probability": 1.0, "error": 0.0,
                                          "ess": None}]
    short = value_tables(draws[:, :3], names, {"b"})["b"]
    assert all(row["error"] is None for row in short["values"])


def test_joint_patterns_of_independent_indicators_have_product_probabilities() -> None:
    """Four independent Bernoulli indicators, P(1) = (0.8, 0.5, 0.1, 0.3): sixteen patterns with
    probability prod p_j^s_j (1 - p_j)^(1 - s_j). The table lists the ten most probable, most
    probable first, each within four errors of that; the other six make up the rest; inclusion
    probabilities are the elements' probabilities of one, equal to their own value tables."""
    rng = np.random.default_rng(93)
    p = np.array([0.8, 0.5, 0.1, 0.3])
    draws = (rng.random((CHAINS, DRAWS, 4)) < p).astype(np.float64)
    names = [f"included[{j}]" for j in range(1, 5)]
    table = pattern_table(draws, "included", names)
    assert table["binary"] and table["elements"] == names
    assert table["distinct_patterns"] == 16
    rows = table["patterns"]
    assert len(rows) == MAX_LISTED_PATTERNS
    assert all(a["probability"] >= b["probability"] for a, b in itertools.pairwise(rows))
    for row in rows:
        s = np.array(row["values"])
        exact = np.prod(np.where(s == 1, p, 1.0 - p))
        assert abs(row["probability"] - exact) < 4 * row["error"], (row, exact)
        assert row["included"] == [names[j] for j in np.flatnonzero(s == 1)]
    other = table["other"]
    assert other["distinct_patterns"] == 6
    assert abs(other["probability"] + sum(r["probability"] for r in rows) - 1.0) < 1e-12
    singles = value_tables(draws, names, set(names))
    for element in table["inclusion"]:
        single = singles[element["name"]]["probability_of_one"]
        assert element["probability"] == single["probability"]
        # the same series in a different batch of the FFT: equal up to rounding
        assert element["error"] == pytest.approx(single["error"], rel=1e-9)


def test_patterns_of_a_vector_with_more_values_than_two() -> None:
    """A vector of counts is tabled too, without inclusion probabilities or included names;
    every pattern drawn is listed when there are at most ten."""
    rng = np.random.default_rng(5)
    draws = rng.integers(0, 3, (CHAINS, DRAWS, 2)).astype(np.float64)
    table = pattern_table(draws, "k", ["k[1]", "k[2]"])
    assert not table["binary"] and table["inclusion"] is None
    assert table["distinct_patterns"] == 9 and table["other"] is None
    assert all("included" not in row for row in table["patterns"])
    for row in table["patterns"]:
        assert abs(row["probability"] - 1 / 9) < 4 * row["error"]
