"""Split R-hat: behaviour described by Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat", Bayesian Analysis 16(2),
sections 3-4 (R-hat near 1 for chains from one distribution, recommended limit 1.01; the folded
rank-normalised version catches chains that differ only in scale, which the classic split R-hat of
BDA3 section 11.4 misses)."""

from __future__ import annotations

import numpy as np
import pytest

from tests.diagnostics.series import ar1
from worker.diagnostics import classic_split_rhat, split_rhat


def test_iid_normal_chains_are_within_1_01() -> None:
    rng = np.random.default_rng(1)
    for _ in range(20):
        assert split_rhat(rng.standard_normal((4, 1000))) < 1.01


def test_well_mixing_autocorrelated_chains_are_within_1_01() -> None:
    rng = np.random.default_rng(2)
    assert split_rhat(ar1(rng, 0.5, (4, 2000))) < 1.01


def test_chains_with_shifted_means_exceed_1_01() -> None:
    rng = np.random.default_rng(3)
    draws = rng.standard_normal((4, 1000)) + np.array([[0.0], [0.0], [0.0], [0.5]])
    assert split_rhat(draws) > 1.01
    assert classic_split_rhat(draws) > 1.01


def test_chains_with_equal_means_and_different_scales_are_caught_only_by_folding() -> None:
    """Vehtari et al. (2021), section 4.2 and their figure of chains with equal location and
    different scale: the classic split R-hat stays near 1, the folded rank-normalised one does
    not."""
    rng = np.random.default_rng(4)
    draws = rng.standard_normal((4, 1000)) * np.array([[1.0], [1.0], [1.0], [3.0]])
    assert classic_split_rhat(draws) < 1.01
    assert split_rhat(draws) > 1.01


def test_trend_within_a_single_chain_is_caught_by_splitting() -> None:
    """Splitting compares a chain's halves (BDA3 section 11.4), so one drifting chain fails."""
    rng = np.random.default_rng(5)
    draws = rng.standard_normal((1, 2000)) + np.linspace(0.0, 2.0, 2000)
    assert split_rhat(draws) > 1.01
    assert split_rhat(rng.standard_normal((1, 2000))) < 1.01


def test_heavy_tails_do_not_inflate_rank_normalised_rhat() -> None:
    """With Cauchy draws the classic R-hat is dominated by a few extreme values; ranks are not
    (Vehtari et al. 2021, section 4.1)."""
    rng = np.random.default_rng(6)
    assert split_rhat(rng.standard_cauchy((4, 1000))) < 1.01


def test_constant_and_stuck_chains() -> None:
    """Every draw identical: nothing to assess (NaN). Each chain stuck on its own value: the chains
    plainly disagree, so R-hat is enormous (infinite up to rounding)."""
    assert np.isnan(split_rhat(np.full((4, 100), 3.0)))
    stuck = np.repeat(np.arange(4.0)[:, None], 100, axis=1)
    assert split_rhat(stuck) > 1e6


@pytest.mark.parametrize("bad", ["nan", "inf", "few"])
def test_undefined_inputs_give_nan(bad: str) -> None:
    rng = np.random.default_rng(7)
    draws = rng.standard_normal((4, 3 if bad == "few" else 100))
    if bad == "nan":
        draws[1, 5] = np.nan
    if bad == "inf":
        draws[1, 5] = np.inf
    assert np.isnan(split_rhat(draws))
