"""Warm starts through the engine's in-process interface (worker/warm_start.py, worker/runner.py).

What is checked: the adapted records a job produces carry the final position and start a later
job; chain k uses record k % n; the same body with the same records and seed gives bitwise the
same draws; a warm-started chain resumes bitwise from a snapshot; a member without records passes
the engine's check but cannot start a chain; bad records give problems with JSON pointers
(RFC 6901) to the field.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from worker import runner
from worker.problems import InvalidSubmission

Y_DAY_1 = [1.2, 0.4, 2.9, 1.7, 0.8, 2.2, 1.1, 3.0]
Y_DAY_2 = [*Y_DAY_1, 1.9, 0.2, 2.4, 1.5]


def location_scale_body(y: list[float], method: str = "nuts", **sampler) -> dict:
    """Normal data with unknown location and scale: two unconstrained values (mu, log sigma)."""
    return {
        "model": {
            "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
            "unknowns": {"mu": {}, "sigma": {"lower": 0}},
            "priors": [
                {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 10}},
                {"on": "sigma", "distribution": "normal", "arguments": {"location": 0, "scale": 5}},
            ],
            "likelihood": [
                {
                    "name": "obs",
                    "observed": "y",
                    "distribution": "normal",
                    "arguments": {"location": "mu", "scale": "sigma"},
                }
            ],
        },
        "data": {"n": len(y), "y": y},
        "sampler": {
            "method": method,
            "chains": 2,
            "warmup_iterations": 150,
            "draws": 150,
            "seed": 20261202,
            **sampler,
        },
    }


_EARLIER: dict[str, dict] = {}


def earlier(method: str = "nuts", preconditioning: str = "per_coordinate") -> dict:
    """Day 1's fit (cached: several tests start from it)."""
    key = f"{method}/{preconditioning}"
    if key not in _EARLIER:
        _EARLIER[key] = runner.run_in_process(
            location_scale_body(Y_DAY_1, method, preconditioning=preconditioning)
        )
    return _EARLIER[key]


def warm_body(method: str = "nuts", from_method: str | None = None, **sampler) -> dict:
    body = location_scale_body(Y_DAY_2, method, **sampler)
    body["warm_start"] = runner.warm_start_from(earlier(from_method or method), job="day-1")
    return body


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_adapted_records_carry_the_final_position(method: str) -> None:
    result = earlier(method)
    for k, record in enumerate(result["adapted"]):
        assert len(record["position"]) == 2
        # the chain's final position is its last draw, on the unconstrained scale
        mu, sigma = result["draws"][k, -1, :2]
        assert record["position"] == pytest.approx([mu, np.log(sigma)], rel=1e-12)
    member = runner.warm_start_from(result, job="day-1")
    assert member["job"] == "day-1" and member["chains"] == result["adapted"]
    assert member["chains"] is not result["adapted"]


def test_chain_k_starts_from_record_k_mod_n() -> None:
    body = warm_body(chains=3)
    records = body["warm_start"]["chains"]
    assert len(records) == 2
    for k in range(3):
        chain = runner.start_chain(body, k).chain
        record = records[k % 2]
        assert chain.state.position.tolist() == record["position"]
        # per-coordinate records hold scales: the chain's inverse metric is their squares
        assert chain.metric.inverse.tolist() == np.square(record["scales"]).tolist()
        assert chain.step_size == record["step_size"]


def test_given_initial_values_win_over_the_earlier_position() -> None:
    body = warm_body(initialisation="given", initial_values={"mu": 5.0, "sigma": 1.0})
    chain = runner.start_chain(body, 0).chain
    assert chain.state.position.tolist() == [5.0, 0.0]


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_same_body_and_records_give_bitwise_the_same_draws(method: str) -> None:
    body = warm_body(method)
    first = runner.run_in_process(copy.deepcopy(body))
    second = runner.run_in_process(copy.deepcopy(body))
    assert first["draws"].tobytes() == second["draws"].tobytes()
    assert first["adapted"] == second["adapted"]
    cold = runner.run_in_process(location_scale_body(Y_DAY_2, method))
    assert not np.array_equal(first["draws"], cold["draws"])


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
@pytest.mark.parametrize("stop_after", [1, 37, 38, 74, 75, 76, 119, 120, 121, 150, 151, 260])
def test_warm_chain_resumes_bitwise_from_a_snapshot(method: str, stop_after: int) -> None:
    """Stops around the warm schedule of 150 iterations (approach to 37, refits after 75 and
    120), at the end of warm-up and in sampling."""
    body = warm_body(method)
    whole = runner.start_chain(body, 1).run()
    first = runner.start_chain(body, 1)
    schedule = first.chain.schedule
    assert (schedule.approach_end, schedule.refits) == (37, (75, 120))
    count = {"n": 0}

    def should_stop() -> bool:
        count["n"] += 1
        return count["n"] > stop_after

    assert not first.run(should_stop=should_stop).completed
    resumed = runner.resume_chain(body, 1, first.snapshot()).run()
    assert resumed.values.tobytes() == whole.values.tobytes()
    assert {k: v.tobytes() for k, v in resumed.stats.items()} == {
        k: v.tobytes() for k, v in whole.stats.items()
    }
    assert resumed.adapted == whole.adapted
    assert resumed.evaluations == whole.evaluations is not None


@pytest.mark.parametrize("method", ["nuts", "metropolis"])
def test_the_warm_start_checks_count_as_warm_up_evaluations(method: str) -> None:
    """Before any iteration: one log-density evaluation per earlier record (the position check of
    worker/warm_start.py), then the start at the earlier position evaluated once, with the gradient
    for NUTS; the metric is of the same kind, so there is no step-size search."""
    body = warm_body(method)
    records = len(body["warm_start"]["chains"])
    counts = runner.start_chain(body, 0).chain.evaluation_counts()
    assert counts is not None
    if method == "nuts":
        assert counts.log_density == {"warmup": records, "sampling": 0}
        assert counts.gradient == {"warmup": 1, "sampling": 0}
    else:
        assert counts.log_density == {"warmup": records + 1, "sampling": 0}
        assert counts.gradient == {"warmup": 0, "sampling": 0}


def test_a_member_without_records_passes_the_check_but_cannot_start() -> None:
    body = location_scale_body(Y_DAY_2)
    body["warm_start"] = {"job": "day-1"}
    assert runner.check_submission(body) == []
    with pytest.raises(InvalidSubmission) as raised:
        runner.run_in_process(body)
    assert [p.pointer for p in raised.value.problems] == ["/warm_start/chains"]
    with pytest.raises(InvalidSubmission):
        runner.start_chain(body, 0)


def _bad(path: str, value) -> dict:
    """Day 2's warm body with one field of record 0 replaced (or removed when value is ...)."""
    body = warm_body()
    record = body["warm_start"]["chains"][0]
    if value is ...:
        del record[path]
    else:
        record[path] = value
    return body


def _member(value) -> dict:
    body = location_scale_body(Y_DAY_2)
    body["warm_start"] = value
    return body


def _metropolis_record_for_nuts() -> dict:
    return warm_body("nuts", from_method="metropolis")


@pytest.mark.parametrize(
    ("make", "pointers"),
    [
        (lambda: _member("day-1"), ["/warm_start"]),
        (lambda: _member({}), ["/warm_start/job"]),
        (lambda: _member({"job": 17}), ["/warm_start/job"]),
        (lambda: _member({"job": "a", "from": "b"}), ["/warm_start/from"]),
        (lambda: _member({"job": "a", "chains": []}), ["/warm_start/chains"]),
        (lambda: _member({"job": "a", "chains": {"0": {}}}), ["/warm_start/chains"]),
        (lambda: _member({"job": "a", "chains": [[1.0]]}), ["/warm_start/chains/0"]),
        (lambda: _member({"job": "a", "chains": [{}] * 17}), ["/warm_start/chains"]),
        (lambda: _bad("step_size", 0.0), ["/warm_start/chains/0/step_size"]),
        (lambda: _bad("step_size", -0.3), ["/warm_start/chains/0/step_size"]),
        (lambda: _bad("step_size", float("inf")), ["/warm_start/chains/0/step_size"]),
        (lambda: _bad("step_size", "0.5"), ["/warm_start/chains/0/step_size"]),
        (lambda: _bad("step_size", ...), ["/warm_start/chains/0/step_size"]),
        (lambda: _bad("preconditioning", "dense"), ["/warm_start/chains/0/preconditioning"]),
        (lambda: _bad("preconditioning", "full"), ["/warm_start/chains/0/scales"]),
        (lambda: _bad("scales", [1.0]), ["/warm_start/chains/0/scales"]),
        (lambda: _bad("scales", [1.0, 2.0, 3.0]), ["/warm_start/chains/0/scales"]),
        (lambda: _bad("scales", [1.0, 0.0]), ["/warm_start/chains/0/scales"]),
        (lambda: _bad("scales", [1.0, float("nan")]), ["/warm_start/chains/0/scales"]),
        (lambda: _bad("scales", [1.0, "x"]), ["/warm_start/chains/0/scales"]),
        (lambda: _bad("scales", ...), ["/warm_start/chains/0"]),
        (lambda: _bad("scales", [[1.0, 0.5], [0.5, 1.0]]),
         ["/warm_start/chains/0/scales"]),  # a matrix where per-coordinate scales belong
        (lambda: _bad("covariance", [[1.0, 0.5], [0.5, 1.0]]),
         ["/warm_start/chains/0/covariance"]),  # both scales and a covariance
        (lambda: _bad("position", [0.1]), ["/warm_start/chains/0/position"]),
        (lambda: _bad("position", [0.1, 0.2, 0.3]), ["/warm_start/chains/0/position"]),
        (lambda: _bad("position", [0.1, float("inf")]), ["/warm_start/chains/0/position"]),
        (lambda: _bad("position", "here"), ["/warm_start/chains/0/position"]),
        (lambda: _bad("doublings", 3), ["/warm_start/chains/0/doublings"]),
        (_metropolis_record_for_nuts, ["/warm_start/chains/0", "/warm_start/chains/1"]),
    ],
)  # fmt: skip
def test_bad_warm_starts_give_problems_with_pointers(make, pointers: list) -> None:
    body = make()
    problems = runner.check_submission(body)
    assert sorted(p.pointer for p in problems) == sorted(pointers), problems
    assert all(p.message.endswith(".") for p in problems)
    with pytest.raises(InvalidSubmission):
        runner.run_in_process(body)


@pytest.mark.parametrize(
    ("inverse", "message"),
    [
        ([[1.0, 0.5], [0.4, 1.0]], "symmetric"),
        ([[1.0, 2.0], [2.0, 1.0]], "positive definite"),
        ([[1.0, 0.0], [0.0]], "must be 2 lists of 2 numbers"),
    ],
)
def test_bad_full_covariances_say_what_is_wrong(inverse: list, message: str) -> None:
    body = warm_body(preconditioning="full")
    record = body["warm_start"]["chains"][1]
    del record["scales"]
    record.update(preconditioning="full", covariance=inverse)
    problems = runner.check_submission(body)
    assert [p.pointer for p in problems] == ["/warm_start/chains/1/covariance"]
    assert message in problems[0].message


def test_records_are_checked_again_once_the_service_fills_them() -> None:
    """The service calls warm_start_problems after copying the earlier job's records in."""
    body = _bad("position", [0.1])
    assert [p.pointer for p in runner.warm_start_problems(body)] == [
        "/warm_start/chains/0/position"
    ]
    assert runner.warm_start_problems(warm_body()) == []
    with pytest.raises(InvalidSubmission):
        runner.start_chain(body, 0)


def test_a_position_impossible_under_the_new_data_is_a_problem() -> None:
    """Model of y ~ Uniform(0, upper): day 2 observes 7.5, so upper = e^1.5 (about 4.5) from
    day 1's fit is outside the new support."""
    body = {
        "model": {
            "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
            "unknowns": {"upper": {"lower": 0}},
            "priors": [{"on": "upper", "distribution": "exponential", "arguments": {"rate": 0.1}}],
            "likelihood": [
                {
                    "name": "obs",
                    "observed": "y",
                    "distribution": "uniform",
                    "arguments": {"lower": 0, "upper": "upper"},
                }
            ],
        },
        "data": {"n": 2, "y": [1.0, 7.5]},
        "sampler": {"seed": 1, "chains": 1, "warmup_iterations": 20, "draws": 10},
        "warm_start": {
            "job": "day-1",
            "chains": [
                {"step_size": 0.5, "preconditioning": "per_coordinate", "scales": [0.3],
                 "position": [1.5]}
            ],
        },  # fmt: skip
    }
    problems = runner.check_submission(body)
    assert [p.pointer for p in problems] == ["/warm_start/chains/0/position"], problems
    assert "not finite" in problems[0].message


def test_a_record_without_a_position_starts_as_the_settings_say() -> None:
    """Records stored before positions were recorded still start a chain, from a random point."""
    body = _bad("position", ...)
    assert runner.check_submission(body) == []
    cold = location_scale_body(Y_DAY_2)
    warm_position = runner.start_chain(body, 0).chain.state.position
    assert warm_position.tolist() == runner.start_chain(cold, 0).chain.state.position.tolist()
    assert warm_position.tolist() != body["warm_start"]["chains"][1]["position"]


def test_a_full_job_starts_from_per_coordinate_records() -> None:
    body = warm_body(preconditioning="full")
    assert runner.check_submission(body) == []
    chain = runner.start_chain(body, 0).chain
    record = body["warm_start"]["chains"][0]
    np.testing.assert_array_equal(chain.metric.inverse, np.diag(np.square(record["scales"])))
    outcome = runner.run_in_process(body)
    assert all(a["preconditioning"] == "full" and "covariance" in a for a in outcome["adapted"])
