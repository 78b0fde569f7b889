"""Summary records, the sampler report and the quality verdict.

Defaults from Vehtari et al. (2021) (R-hat 1.01, ESS 400) and Betancourt (2016) / common practice
(E-BFMI 0.3, zero divergences). The checks here are that each failed check is listed with the value
the summary reports and the threshold it missed, and that sound draws pass.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from tests.diagnostics.series import ar1
from worker.diagnostics import DEFAULT_THRESHOLDS, sampler_checks, summarize, verdict
from worker.problems import InvalidSubmission


def _good_report(chains: int = 4, draws: int = 1000) -> dict:
    rng = np.random.default_rng(0)
    momenta = 0.5 * np.sum(rng.standard_normal((chains, draws + 1, 5)) ** 2, axis=2)
    return sampler_checks(
        [
            {
                "divergent": np.zeros(draws, dtype=bool),
                "doublings": np.full(draws, 3),
                "accept_probability": np.full(draws, 0.8),
                "energy": momenta[c, :-1] + momenta[c, 1:],
            }
            for c in range(chains)
        ],
        maximum_tree_depth=10,
    )


def test_summary_of_iid_normal_draws_agrees_with_scipy() -> None:
    """Mean, sd and quantiles of 40 000 N(1, 2^2) draws within 4 of their own MCSE of the
    scipy.stats.norm values."""
    rng = np.random.default_rng(1)
    draws = rng.normal(1.0, 2.0, size=(4, 10_000, 1))
    (record,) = summarize(draws, ["x"])  # the default 80% interval: 10% and 90% quantiles
    truth = stats.norm(1.0, 2.0)
    assert abs(record["mean"] - truth.mean()) < 4 * record["mean_error"]
    assert abs(record["sd"] - truth.std()) < 4 * record["sd_error"]
    assert record["interval"]["level"] == 0.8
    points = {"lower": record["interval"]["lower"], "median": record["median"],
              "upper": record["interval"]["upper"]}  # fmt: skip
    for p, label in ((0.1, "lower"), (0.5, "median"), (0.9, "upper")):
        error = abs(points[label] - truth.ppf(p))
        assert error < 4 * record["quantile_errors"][label]
    assert record["rhat"] < 1.01 and record["bulk_ess"] > 30_000 and record["note"] is None


def test_summary_is_strict_json_and_marks_undefined_quantities() -> None:
    rng = np.random.default_rng(2)
    draws = rng.standard_normal((2, 50, 3))
    draws[:, :, 1] = 1.0
    draws[0, 3, 2] = np.nan
    records = summarize(draws, ["a", "b", "c"], interval=0.95)
    json.dumps(records, allow_nan=False)
    assert [r["note"] for r in records] == [None, "constant", "not_finite"]
    # the 95% central interval's end points are the 2.5% and 97.5% quantiles (numpy's default)
    flat = draws[:, :, 0].ravel()
    interval = records[0]["interval"]
    assert interval["level"] == 0.95
    expected = np.quantile(flat, [0.025, 0.975])
    assert [interval["lower"], interval["upper"]] == pytest.approx(expected, rel=1e-12)
    assert records[0]["median"] == pytest.approx(float(np.median(flat)), rel=1e-12)
    assert list(records[0]) == ["name", "median", "interval", "mean", "sd", "rhat", "bulk_ess",
                                "tail_ess", "mean_error", "sd_error", "quantile_errors", "note"]
    for level in (0, 1, 1.5, True, "0.9"):
        with pytest.raises(ValueError, match="strictly between 0 and 1"):
            summarize(draws, ["a", "b", "c"], interval=level)
    assert records[1]["rhat"] is None and records[1]["mean_error"] == 0.0
    assert records[2]["mean"] is None and records[2]["rhat"] is None
    short = summarize(rng.standard_normal((4, 2, 1)), ["d"])
    assert short[0]["note"] == "too_few_draws" and short[0]["rhat"] is None


def test_summary_handles_many_quantities_in_passes() -> None:
    """Wide outputs are summarised in several vectorised passes; every record must still match
    the one-quantity functions."""
    from worker.diagnostics import bulk_ess, quantile_error, split_rhat, tail_ess
    from worker.diagnostics import summary as summary_module

    rng = np.random.default_rng(3)
    draws = ar1(rng, 0.3, (4, 7, 500)).transpose(0, 2, 1)
    original = summary_module.CELLS_PER_PASS
    summary_module.CELLS_PER_PASS = 4 * 500 * 3  # three quantities per pass
    try:
        records = summarize(draws, [f"x[{i + 1}]" for i in range(7)])
    finally:
        summary_module.CELLS_PER_PASS = original
    for i, record in enumerate(records):
        assert record["rhat"] == pytest.approx(split_rhat(draws[:, :, i]))
        assert record["bulk_ess"] == pytest.approx(bulk_ess(draws[:, :, i]))
        assert record["tail_ess"] == pytest.approx(tail_ess(draws[:, :, i]))
        expected = quantile_error(draws[:, :, i], 0.5)
        assert record["quantile_errors"]["median"] == pytest.approx(expected)


def test_sound_draws_pass_with_defaults() -> None:
    rng = np.random.default_rng(4)
    records = summarize(rng.standard_normal((4, 1000, 3)), ["a", "b", "c"])
    result = verdict(records, _good_report())
    assert result == {"passed": True, "failed_checks": [], "thresholds": DEFAULT_THRESHOLDS}
    json.dumps(result, allow_nan=False)


def test_each_failed_check_is_listed_with_its_value_and_threshold() -> None:
    rng = np.random.default_rng(5)
    draws = rng.standard_normal((4, 1000, 3))
    draws[3, :, 0] += 1.0  # one chain elsewhere: R-hat
    draws[:, :, 1] = ar1(rng, 0.995, (4, 1000))  # slow mixing: low ESS
    records = summarize(draws, ["shifted", "sticky", "fine"])
    report = _good_report()
    report["divergences_per_chain"] = [0, 3, 0, 1]
    report["divergences"] = 4
    report["ebfmi_per_chain"][2] = 0.12
    result = verdict(records, report)
    assert result["passed"] is False
    found = {(f["check"], f["quantity"], f["chain"]): f for f in result["failed_checks"]}
    by_name = {r["name"]: r for r in records}
    shifted = found[("max_rhat", "shifted", None)]
    assert shifted["value"] == by_name["shifted"]["rhat"] and shifted["threshold"] == 1.01
    sticky = found[("min_bulk_ess", "sticky", None)]
    assert sticky["value"] == by_name["sticky"]["bulk_ess"] and sticky["threshold"] == 400
    assert ("min_tail_ess", "sticky", None) in found
    divergences = found[("max_divergences", None, None)]
    assert divergences["value"] == 4 and divergences["threshold"] == 0
    assert "chain 2: 3" in divergences["message"]
    energy = found[("min_ebfmi", None, 3)]
    assert energy["value"] == 0.12 and energy["threshold"] == 0.3
    assert not any(key[1] == "fine" for key in found)
    assert all(f["message"].endswith(".") for f in result["failed_checks"])


def test_thresholds_can_be_relaxed_or_switched_off() -> None:
    rng = np.random.default_rng(6)
    records = summarize(ar1(rng, 0.99, (4, 1000))[:, :, None], ["sticky"])
    strict = verdict(records, _good_report())
    assert not strict["passed"]
    relaxed = verdict(
        records, _good_report(), {"min_bulk_ess": 5, "min_tail_ess": None, "max_rhat": 1.5}
    )
    assert relaxed["passed"], relaxed["failed_checks"]
    assert relaxed["thresholds"]["min_tail_ess"] is None


def test_constant_quantities_are_skipped_and_non_finite_ones_fail() -> None:
    rng = np.random.default_rng(7)
    draws = rng.standard_normal((4, 1000, 2))
    draws[:, :, 0] = 1.0
    draws[1, 10, 1] = np.inf
    result = verdict(summarize(draws, ["fixed", "broken"]), _good_report())
    assert [(f["check"], f["quantity"], f["value"]) for f in result["failed_checks"]] == [
        ("max_rhat", "broken", None)
    ]


@pytest.mark.parametrize(
    ("checks", "where"),
    [
        ({"max_rhatt": 1.1}, "/checks/max_rhatt"),
        ({"min_bulk_ess": "many"}, "/checks/min_bulk_ess"),
        ({"min_ebfmi": True}, "/checks/min_ebfmi"),
        ({"max_rhat": 0.9}, "/checks/max_rhat"),
        ({"max_divergences": 1.5}, "/checks/max_divergences"),
        ({"a/b": 1}, "/checks/a~1b"),
        ({"max_depth_saturation": 1.5}, "/checks/max_depth_saturation"),
        ({"max_depth_saturation": -0.1}, "/checks/max_depth_saturation"),
    ],
)
def test_bad_thresholds_raise_with_pointers(checks: dict, where: str) -> None:
    with pytest.raises(InvalidSubmission) as caught:
        verdict([], _good_report(), checks)
    assert [p.pointer for p in caught.value.problems] == [where]


def test_sampler_checks_counts_per_chain() -> None:
    stats_per_chain = [
        {
            "divergent": np.array([0, 1, 1, 0], dtype=bool),
            "doublings": np.array([3, 5, 5, 2]),
            "accept_probability": np.array([0.5, 0.7, 0.9, 0.9]),
            "energy": np.array([1.0, 2.0, 1.5, 3.0]),
        },
        {
            "divergent": np.zeros(4, dtype=bool),
            "doublings": np.array([5, 5, 5, 5]),
            "accept_probability": np.array([1.0, 1.0, 1.0, 0.6]),
            "energy": np.array([2.0, 2.0, 2.0, 2.0]),
        },
    ]
    report = sampler_checks(stats_per_chain, maximum_tree_depth=5)
    assert report["divergences"] == 2 and report["divergences_per_chain"] == [2, 0]
    assert report["tree_depth_hits"] == 6 and report["tree_depth_hits_per_chain"] == [2, 4]
    assert report["mean_acceptance_per_chain"] == pytest.approx([0.75, 0.9])
    # sum of squared steps 1 + 0.25 + 2.25 = 3.5 over squared deviations from 1.875: 2.1875
    assert report["ebfmi_per_chain"][0] == pytest.approx(3.5 / 2.1875)
    assert report["ebfmi_per_chain"][1] is None  # constant energy: undefined
    json.dumps(report, allow_nan=False)


def test_sampler_checks_for_a_method_without_trees_or_energy() -> None:
    stats = [{"accept_probability": np.full(10, 0.25)}] * 2
    report = sampler_checks(stats, maximum_tree_depth=None)
    assert report["divergences"] is None and report["tree_depth_hits"] is None
    assert report["ebfmi_per_chain"] == [None, None]
    assert verdict([], report)["passed"]


@pytest.mark.parametrize(
    ("value", "limit", "digits", "expected"),
    [
        (1.0132, 1.01, 5, "1.0132"),
        (1.01004, 1.01, 5, "1.01004"),
        (1.0100000004, 1.01, 5, "1.0100000004"),
        (399.6, 400.0, 4, "399.6"),
        (399.99, 400.0, 4, "399.99"),
        (0.2999, 0.3, 3, "0.2999"),
    ],
)
def test_a_failed_value_is_printed_with_the_digits_that_show_the_comparison(
    value: float, limit: float, digits: int, expected: str
) -> None:
    """The printed number must be on the same side of the threshold as the value itself, and not
    equal to it (seen before: "R-hat ... is 1.01, above 1.01")."""
    from worker.diagnostics.verdict import shown_against

    shown = shown_against(value, limit, digits)
    assert shown == expected
    assert float(shown) != limit and (float(shown) > limit) == (value > limit)


def test_the_rhat_message_shows_a_value_beside_its_threshold_that_differs_from_it() -> None:
    record = {"name": "mu", "rhat": 1.010004, "bulk_ess": 5000.0, "tail_ess": 5000.0}
    judged = verdict([record], _good_report())
    (failure,) = judged["failed_checks"]
    assert "R-hat of mu is 1.010004, above 1.01" in failure["message"]
def _depth_report(depths_per_chain: list[list[int]], maximum: int = 10) -> dict:
    stats_per_chain = [
        {
            "divergent": np.zeros(len(d), dtype=bool),
            "doublings": np.array(d),
            "accept_probability": np.full(len(d), 0.8),
            "energy": np.random.default_rng(c).standard_normal(len(d)),
        }
        for c, d in enumerate(depths_per_chain)
    ]
    return sampler_checks(stats_per_chain, maximum_tree_depth=maximum)


def test_tree_depth_saturation_fails_above_its_share_and_names_the_chains() -> None:
    """A share of iterations at the depth cap above max_depth_saturation (default 0.05, our own
    choice; warning when many iterations hit the cap is common practice) is one failed check with
    the pooled share as its value; at or below the share, or switched off, nothing fails."""
    assert DEFAULT_THRESHOLDS["max_depth_saturation"] == 0.05
    # chain 1: 12 of 100 at the cap, chain 2: none -> 6 % of 200
    report = _depth_report([[10] * 12 + [4] * 88, [3] * 100])
    failed = [
        f for f in verdict([], report)["failed_checks"] if f["check"] == "max_depth_saturation"
    ]
    assert len(failed) == 1
    assert failed[0]["value"] == pytest.approx(0.06) and failed[0]["threshold"] == 0.05
    assert (
        "6% of sampling iterations (12 of 200; chain 1: 12%, chain 2: 0%)" in failed[0]["message"]
    )
    assert "maximum tree depth of 10" in failed[0]["message"]
    checks = {"max_depth_saturation": 0.06}
    assert not verdict([], report, checks)["failed_checks"]
    assert not verdict([], report, {"max_depth_saturation": None})["failed_checks"]
    exactly = _depth_report([[10] * 5 + [4] * 95])
    assert not verdict([], exactly)["failed_checks"]  # 5 % is not above 5 %
    assert verdict([], report)["thresholds"]["max_depth_saturation"] == 0.05


def test_methods_without_trees_are_not_checked_for_depth() -> None:
    report = sampler_checks([{"accept_probability": np.full(50, 0.3)}], maximum_tree_depth=None)
    assert not verdict([], report, {"min_ebfmi": None})["failed_checks"]
