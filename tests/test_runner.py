"""The engine's in-process interface (DEVELOPERS.md, "The engine's in-process interface").

What is checked: the same body gives bitwise-identical draws; a chain resumed from a snapshot
gives exactly the draws (and generated quantities) of the uninterrupted chain, whose seeds follow
DEVELOPERS.md (SeedSequence(seed).spawn(chains); child 0 sampling, child 1 generated quantities);
bad settings are reported with JSON pointers (RFC 6901) into the body.
"""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest

from worker import runner
from worker.problems import InvalidSubmission

Y = [1.2, 0.4, 2.9, 1.7, 0.8, 2.2, 1.1, 3.0]


def normal_mean_body(method: str = "nuts", **sampler) -> dict:
    """Normal data with known sd 2 and a normal prior on the mean; replicates are generated so
    the generated-quantities stream is exercised too."""
    return {
        "model": {
            "inputs": {"n": {"type": "integer"}, "y": {"type": "real", "shape": ["n"]}},
            "unknowns": {"mu": {}},
            "priors": [
                {"on": "mu", "distribution": "normal", "arguments": {"location": 0, "scale": 10}}
            ],
            "likelihood": [
                {
                    "name": "obs",
                    "observed": "y",
                    "distribution": "normal",
                    "arguments": {"location": "mu", "scale": 2},
                }
            ],
            "per_draw": {"replicates": ["obs"]},
        },
        "data": {"n": len(Y), "y": Y},
        "sampler": {
            "method": method,
            "chains": 2,
            "warmup_iterations": 150,
            "draws": 150,
            "seed": 20261201,
            **sampler,
        },
    }


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_run_in_process_is_bitwise_reproducible(method: str) -> None:
    body = normal_mean_body(method)
    first = runner.run_in_process(copy.deepcopy(body))
    second = runner.run_in_process(copy.deepcopy(body))
    assert first["draws"].shape == (2, 150, 1 + len(Y))
    assert first["names"][:2] == ["mu", "replicate.obs[1]"]
    assert first["draws"].tobytes() == second["draws"].tobytes()
    for a, b in zip(first["stats"], second["stats"], strict=True):
        assert {k: v.tobytes() for k, v in a.items()} == {k: v.tobytes() for k, v in b.items()}
    assert first["summary"] == second["summary"]
    # different chains of one job draw differently, and another seed gives other draws
    assert not np.array_equal(first["draws"][0], first["draws"][1])
    other = runner.run_in_process(normal_mean_body(method, seed=7))
    assert not np.array_equal(first["draws"], other["draws"])


def test_outcome_is_strict_json_and_records_the_seed() -> None:
    body = normal_mean_body()
    del body["sampler"]["seed"]
    outcome = runner.run_in_process(body)
    seed = outcome["settings"]["seed"]
    assert isinstance(seed, int) and 0 <= seed <= runner.MAX_SEED
    json.dumps(
        {k: outcome[k] for k in ("summary", "sampler", "verdict", "settings")}, allow_nan=False
    )
    again = runner.run_in_process(normal_mean_body(seed=seed))
    assert np.array_equal(outcome["draws"], again["draws"])


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
def test_the_sampler_report_counts_each_chains_evaluations_by_phase(method: str) -> None:
    outcome = runner.run_in_process(normal_mean_body(method))
    gradients = outcome["sampler"]["gradient_evaluations_per_chain"]
    densities = outcome["sampler"]["log_density_evaluations_per_chain"]
    assert len(gradients) == len(densities) == 2
    for stats, gradient, density in zip(outcome["stats"], gradients, densities, strict=True):
        if method == "metropolis":
            # no gradient; one log density per proposal, the start at least once more
            assert gradient == {"warmup": 0, "sampling": 0}
            assert density["sampling"] == 150 and density["warmup"] > 150
        else:
            # one gradient per leapfrog step in sampling; initialisation and searches in warm-up
            assert gradient["sampling"] == int(stats["gradient_calls"].sum())
            assert gradient["warmup"] > 150 and density == {"warmup": 0, "sampling": 0}


@pytest.mark.parametrize("method", ["nuts", "hmc", "metropolis"])
@pytest.mark.parametrize("stop_after", [1, 90, 150, 151, 260])
def test_resume_from_a_snapshot_equals_the_uninterrupted_run(method: str, stop_after: int) -> None:
    """Stopped in warm-up, at its end, at the first draw and in sampling; the resumed chain must
    give exactly the uninterrupted chain's draws, statistics and generated quantities."""
    body = normal_mean_body(method)
    whole = runner.start_chain(body, 1).run()
    assert whole.completed

    first = runner.start_chain(body, 1)
    count = {"n": 0}

    def should_stop() -> bool:
        count["n"] += 1
        return count["n"] > stop_after

    partial = first.run(should_stop=should_stop)
    assert not partial.completed
    blob = first.snapshot()
    resumed = runner.resume_chain(body, 1, blob).run()
    assert resumed.completed
    assert resumed.values.tobytes() == whole.values.tobytes()
    assert {k: v.tobytes() for k, v in resumed.stats.items()} == {
        k: v.tobytes() for k, v in whole.stats.items()
    }
    assert resumed.adapted == whole.adapted


def test_checkpoints_resume_to_the_same_draws() -> None:
    body = normal_mean_body()
    blobs: list[bytes] = []
    whole = runner.start_chain(body, 0).run(checkpoint=blobs.append, checkpoint_every=50)
    assert len(blobs) == 5  # after 50, 100, ..., 250 of 300 iterations
    for blob in (blobs[0], blobs[3]):
        resumed = runner.resume_chain(body, 0, blob).run()
        assert resumed.values.tobytes() == whole.values.tobytes()


def test_resume_refuses_a_snapshot_from_other_settings() -> None:
    blob = runner.start_chain(normal_mean_body(), 0).snapshot()
    with pytest.raises(ValueError, match="different sampler settings"):
        runner.resume_chain(normal_mean_body(draws=151), 0, blob)


def test_chain_seeds_follow_the_contract() -> None:
    seeds = runner.chain_seeds(42, 3)
    expected = np.random.SeedSequence(42).spawn(3)
    assert [s.generate_state(4).tolist() for s in seeds] == [
        s.generate_state(4).tolist() for s in expected
    ]


def test_start_chain_needs_a_recorded_seed() -> None:
    body = normal_mean_body()
    del body["sampler"]["seed"]
    with pytest.raises(ValueError, match="no recorded seed"):
        runner.start_chain(body, 0)


def test_resolve_sampler_fills_every_default() -> None:
    resolved = runner.resolve_sampler({"method": "hmc", "seed": 5})
    assert resolved["method"] == "hmc" and resolved["seed"] == 5
    assert resolved["chains"] == runner.DEFAULT_CHAINS
    assert resolved["draws"] == 1000 and resolved["warmup_iterations"] == 1000
    assert set(runner.CHAIN_SETTINGS) <= set(resolved)
    assert resolved["reparametrise"] is True
    drawn = {runner.resolve_sampler({})["seed"] for _ in range(5)}
    assert len(drawn) == 5  # drawn from OS entropy, not a fixed default


@pytest.mark.parametrize(
    ("sampler", "pointers"),
    [
        ({"method": "gibbs"}, ["/sampler/method"]),
        ({"draws": 0}, ["/sampler/draws"]),
        ({"draws": 2.5, "chains": 0}, ["/sampler/draws", "/sampler/chains"]),
        ({"chains": 17}, ["/sampler/chains"]),
        ({"warmup_iterations": 200_000}, ["/sampler/warmup_iterations"]),
        ({"seed": -1}, ["/sampler/seed"]),
        ({"target_acceptance": 1.0}, ["/sampler/target_acceptance"]),
        ({"maximum_tree_depth": 0}, ["/sampler/maximum_tree_depth"]),
        ({"preconditioning": "dense"}, ["/sampler/preconditioning"]),
        ({"integration_time": -1}, ["/sampler/integration_time"]),
        ({"jitter": "yes"}, ["/sampler/jitter"]),
        ({"divergence_threshold": float("inf")}, ["/sampler/divergence_threshold"]),
        ({"initialisation": "given"}, ["/sampler/initial_values"]),
        ({"start_spread": 0}, ["/sampler/start_spread"]),
        ({"reparametrise": "no"}, ["/sampler/reparametrise"]),
        ({"step_size": 0.1}, ["/sampler/step_size"]),
        ({"initial_values": [{"mu": 1.0}]}, ["/sampler/initial_values"]),
        ({"initial_values": {"mu": [1.0, 2.0]}}, ["/sampler/initial_values/mu"]),
        (
            {"initial_values": {"sigma": 1.0}},
            ["/sampler/initial_values/mu", "/sampler/initial_values/sigma"],
        ),
    ],
)
def test_bad_sampler_settings_give_problems_with_pointers(sampler: dict, pointers: list) -> None:
    body = normal_mean_body(**sampler)
    problems = runner.check_submission(body)
    assert sorted(p.pointer for p in problems) == sorted(pointers), problems
    assert all(p.message.endswith(".") for p in problems)
    with pytest.raises(InvalidSubmission):
        runner.run_in_process(body)


def test_limits_are_arguments() -> None:
    body = normal_mean_body(chains=3, draws=500)
    assert runner.check_submission(body) == []
    found = runner.check_submission(body, max_chains=2, max_draws=400)
    assert sorted(p.pointer for p in found) == ["/sampler/chains", "/sampler/draws"]


def test_bad_checks_and_members_give_pointers() -> None:
    body = normal_mean_body()
    body["checks"] = {"max_rhat": "low", "min_ess": 100}
    body["extra"] = 1
    pointers = sorted(p.pointer for p in runner.check_submission(body))
    assert pointers == ["/checks/max_rhat", "/checks/min_ess", "/extra"]


def test_model_problems_come_through_with_model_pointers() -> None:
    body = normal_mean_body()
    body["model"]["priors"][0]["distribution"] = "nomal"
    body["data"]["y"] = Y[:3]
    problems = runner.check_submission(body)
    assert problems
    assert all(p.pointer.startswith(("/model/", "/data/")) for p in problems)


def test_given_initial_values_start_every_chain_there() -> None:
    body = normal_mean_body(
        initialisation="given",
        initial_values=[{"mu": 40.0}, {"mu": -40.0}],
        warmup_iterations=0,
        draws=5,
        method="metropolis",
    )
    assert runner.check_submission(body) == []
    first = runner.start_chain(body, 0).chain.state.position
    second = runner.start_chain(body, 1).chain.state.position
    assert first.tolist() == [40.0] and second.tolist() == [-40.0]


def test_finishing_pools_chains_held_in_one_array_without_a_copy():
    """The service's finishing step decodes chains into one (chains, draws, quantities) array;
    finish_job then summarises that array itself, with the same records as from separate arrays."""
    body = normal_mean_body(chains=2, warmup_iterations=50, draws=30, seed=5)
    resolved = runner.resolve_sampler(body["sampler"])
    job = {**body, "sampler": {k: v for k, v in resolved.items() if v is not None}}
    results = [runner.start_chain(job, i).run() for i in range(2)]
    separate = runner.finish_job(job, results)
    pooled = np.stack([r.values for r in results])
    for i, r in enumerate(results):
        r.values = pooled[i]
    assert runner.pooled_draws(results) is pooled
    assert json.dumps(runner.finish_job(job, results), sort_keys=True) == json.dumps(
        separate, sort_keys=True)
    results[1].values = pooled[1].copy()
    assert runner.pooled_draws(results) is not pooled
