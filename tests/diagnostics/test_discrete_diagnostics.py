"""R-hat and ESS of integer-valued draws, where exact values are known in closed form.

Rank normalisation (Vehtari et al. 2021, section 4.1) gives tied draws their average rank (the
paper's choice as we recall it; worker/diagnostics/ranks.py), so a quantity with k distinct
values becomes k distinct normal scores, in the same order. For a two-valued quantity that map is
affine, and R-hat and ESS are unchanged by affine maps (they are ratios of variances and
autocorrelations), so bulk-ESS and rank-normalised R-hat of a 0/1 series equal the ones of the
raw series: the closed forms below apply to them directly.

Closed forms (our derivation, written out in docs/discrete-summaries.md):
- iid Bernoulli(p): every autocorrelation is 0, the integrated autocorrelation time is 1, and
  ESS = N (the number of pooled draws).
- A two-state Markov chain on {0, 1} that leaves 0 with probability a and 1 with probability b,
  started in its stationary law (pi_1 = a / (a + b)): its transition matrix has eigenvalues 1
  and rho = 1 - a - b, so the lag-k autocorrelation is rho^k and the integrated autocorrelation
  time is 1 + 2 sum_k rho^k = (1 + rho) / (1 - rho) = (2 - a - b) / (a + b); ESS = N / tau. With
  a = b = q (a symmetric flip) rho = 1 - 2q and tau = (1 - q) / q. This is the AR(1) fact of
  REFERENCES.md ("Facts of the trade") for a chain whose autocorrelations are those of an AR(1).

The tolerances follow tests/diagnostics/test_ess.py: four standard errors of the mean over
independent replicates plus the 3% finite-sample bias allowance of the truncated estimator.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from worker.diagnostics import bulk_ess, ess, split_rhat, summarize, verdict
from worker.diagnostics.ess import bulk_ess_batch, ess_batch, tail_ess_batch
from worker.diagnostics.ranks import BLOM_OFFSET, rank_normalize
from worker.diagnostics.rhat import split_rhat_batch

REPLICATES = 60
CHAINS = 4
DRAWS = 1000
BIAS_ALLOWANCE = 0.03


def two_state_chain(
    rng: np.random.Generator, leave_zero: float, leave_one: float, shape: tuple[int, ...]
) -> np.ndarray:
    """Stationary two-state Markov chains along the last axis (values 0 and 1)."""
    stationary_one = leave_zero / (leave_zero + leave_one)
    uniforms = rng.random(shape)
    x = np.empty(shape)
    x[..., 0] = uniforms[..., 0] < stationary_one
    for t in range(1, shape[-1]):
        previous = x[..., t - 1]
        leave = np.where(previous == 1.0, leave_one, leave_zero)
        x[..., t] = np.where(uniforms[..., t] < leave, 1.0 - previous, previous)
    return x


def _close(estimates: np.ndarray, expected: float) -> None:
    tolerance = 4.0 * estimates.std(ddof=1) / np.sqrt(estimates.size) + BIAS_ALLOWANCE * expected
    assert abs(estimates.mean() - expected) < tolerance, (estimates.mean(), expected, tolerance)


@pytest.mark.parametrize("p", [0.5, 0.1])
def test_ess_of_iid_bernoulli_draws_is_the_number_of_draws(p: float) -> None:
    rng = np.random.default_rng(20261203)
    draws = (rng.random((REPLICATES, CHAINS, DRAWS)) < p).astype(np.float64)
    for estimates in (ess_batch(draws), bulk_ess_batch(draws)):
        _close(estimates, CHAINS * DRAWS)
    # chains drawn from one law agree: rank-normalised split R-hat near 1 (Vehtari et al. 2021
    # recommend 1.01 as the limit; with 4 x 1000 iid draws it stays well inside)
    assert split_rhat_batch(draws).max() < 1.01


@pytest.mark.parametrize(("leave_zero", "leave_one"), [(0.1, 0.1), (0.3, 0.3), (0.7, 0.7),
                                                       (0.05, 0.2)])
def test_ess_of_a_two_state_markov_chain_matches_its_autocorrelation_time(
    leave_zero: float, leave_one: float
) -> None:
    """tau = (1 + rho) / (1 - rho) with rho = 1 - a - b (module docstring); flip probability 0.7
    gives rho = -0.4, an antithetic chain with ESS above N."""
    rng = np.random.default_rng(int(1000 * leave_zero + 10 * leave_one))
    draws = two_state_chain(rng, leave_zero, leave_one, (REPLICATES, CHAINS, DRAWS))
    rho = 1.0 - leave_zero - leave_one
    expected = CHAINS * DRAWS * (1.0 - rho) / (1.0 + rho)
    basic, bulk = ess_batch(draws), bulk_ess_batch(draws)
    _close(basic, expected)
    # two values: ranks are an affine map of the draws, so bulk-ESS is the basic ESS exactly
    np.testing.assert_allclose(bulk, basic, rtol=1e-9)


def test_ties_share_their_average_rank() -> None:
    """k zeros among S draws all get rank (k + 1) / 2 and the ones k + (S - k + 1) / 2, then the
    normal score Phi^-1((r - 3/8) / (S + 1/4)) (Blom's offset, as in Vehtari et al. 2021)."""
    x = np.array([[[0.0, 1.0, 0.0, 0.0, 1.0], [1.0, 0.0, 0.0, 1.0, 0.0]]])
    size, zeros = x.size, int((x == 0).sum())
    scores = rank_normalize(x)
    low = special.ndtri(((zeros + 1) / 2 - BLOM_OFFSET) / (size + 0.25))
    high = special.ndtri((zeros + (size - zeros + 1) / 2 - BLOM_OFFSET) / (size + 0.25))
    np.testing.assert_allclose(scores[x == 0], low)
    np.testing.assert_allclose(scores[x == 1], high)


def test_three_valued_draws_keep_their_order_and_ties_after_ranking() -> None:
    """Ranks with ties are a monotone map: equal draws share a score and order is kept."""
    rng = np.random.default_rng(2)
    x = rng.integers(0, 3, (1, 3, 50)).astype(np.float64)
    scores = rank_normalize(x)
    for value in (0.0, 1.0, 2.0):
        assert np.ptp(scores[x == value]) == 0.0
    assert scores[x == 0].max() < scores[x == 1].min() < scores[x == 2].max()


def test_constant_integer_columns_have_defined_results() -> None:
    """Every draw the same: R-hat and ESS are undefined (None, note 'constant', no crash), the
    estimates exact, and the verdict skips the quantity (a constant carries no information about
    mixing; worker/diagnostics/verdict.py)."""
    x = np.full((CHAINS, DRAWS, 1), 3.0)
    (record,) = summarize(x, ["k"])
    assert record["note"] == "constant"
    assert record["rhat"] is None and record["bulk_ess"] is None and record["mean_error"] == 0.0
    assert np.isnan(split_rhat(x[..., 0])) and np.isnan(ess(x[..., 0]))
    assert verdict([record], {"divergences": 0})["passed"]


def test_one_chain_stuck_on_one_value_raises_rhat_to_its_closed_form() -> None:
    """Three chains of iid Bernoulli(1/2) and one stuck at 0. Split in halves: six of mean 1/2
    and variance 1/4, two of mean 0 and variance 0, so W = 6 (1/4) / 8 = 3/16 and the variance of
    the eight means is (6 (1/8)^2 + 2 (3/8)^2) / 7 = 3/56; for long chains R-hat tends to
    sqrt((W + 3/56) / W) = sqrt(9/7) = 1.1339 (our derivation). Folding about the pooled median
    (0, since 5/8 of the draws are 0) leaves the draws as they are, so the tail R-hat is the same.
    The chain-mean noise adds about 1/(4 n) = 0.0005 to the between part at n = 500 per half:
    an R-hat bias of about 0.002, inside the allowance of 0.005."""
    rng = np.random.default_rng(4)
    draws = (rng.random((REPLICATES, CHAINS, DRAWS)) < 0.5).astype(np.float64)
    draws[:, 3, :] = 0.0
    estimates = split_rhat_batch(draws)
    expected = np.sqrt(9.0 / 7.0)
    tolerance = 4.0 * estimates.std(ddof=1) / np.sqrt(REPLICATES) + 0.005
    assert abs(estimates.mean() - expected) < tolerance, (estimates.mean(), expected)
    (record,) = summarize(draws[0][..., None], ["z"])
    assert not verdict([record], {"divergences": 0})["passed"]


def test_chains_each_stuck_on_a_different_value_fail_with_a_huge_rhat() -> None:
    """W = 0 and B > 0: R-hat is +infinity in exact arithmetic (rounding in the mean of equal
    normal scores can leave W a few ulps above 0, so a huge finite number), failed by the
    verdict; the ESS is about one per split chain, not the number of draws."""
    x = np.zeros((CHAINS, DRAWS))
    x[1::2] = 1.0
    assert split_rhat(x) > 1e6
    assert bulk_ess(x) <= 2 * CHAINS
    (record,) = summarize(x[..., None], ["z"])
    assert record["rhat"] is None or record["rhat"] > 1e6
    assert record["note"] is None
    failed = verdict([record], {"divergences": 0})["failed_checks"]
    assert [f["check"] for f in failed] == ["max_rhat", "min_bulk_ess", "min_tail_ess"]


def test_a_binary_quantity_with_as_many_ones_as_zeros_has_a_finite_rhat() -> None:
    """The pooled median is then 1/2 and folding about it gives a constant series, whose tail
    R-hat is undefined; the bulk R-hat must decide, not turn the result into 'undefined' (which
    the verdict would fail as infinite). Well-mixed iid draws: R-hat below 1.01."""
    rng = np.random.default_rng(0)
    x = np.zeros(CHAINS * DRAWS)
    x[: x.size // 2] = 1.0
    x = rng.permutation(x).reshape(CHAINS, DRAWS)
    assert split_rhat(x) < 1.01
    (record,) = summarize(x[..., None], ["z"])
    assert verdict([record], {"divergences": 0})["passed"]


def test_tail_ess_of_a_binary_quantity_uses_the_quantile_indicator_that_varies() -> None:
    """For a 0/1 quantity with P(1) = 1/2 the 95% quantile is 1 and I(x <= 1) never changes, but
    the 5% indicator I(x <= 0) is the series itself: tail-ESS is its ESS, the two-state chain's
    N q / (1 - q) (module docstring), not undefined."""
    rng = np.random.default_rng(9)
    q = 0.1
    draws = two_state_chain(rng, q, q, (REPLICATES, CHAINS, DRAWS))
    estimates = tail_ess_batch(draws)
    assert np.isfinite(estimates).all()
    _close(estimates, CHAINS * DRAWS * q / (1.0 - q))
