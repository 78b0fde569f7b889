"""Settings: defaults as documented, and clear messages for bad values."""

from __future__ import annotations

import pytest

from worker.samplers import SamplerSettings


def test_default_target_acceptance_by_method_and_dimension() -> None:
    """0.8 for Hamiltonian methods (Hoffman & Gelman 2014, section 3.2); 0.234 for random-walk
    Metropolis in d > 1 and 0.44 in d = 1 (Roberts, Gelman & Gilks 1997)."""
    assert SamplerSettings().acceptance_goal(5) == 0.8
    assert SamplerSettings(method="hmc").acceptance_goal(1) == 0.8
    assert SamplerSettings(method="metropolis").acceptance_goal(5) == 0.234
    assert SamplerSettings(method="metropolis").acceptance_goal(1) == 0.44
    assert SamplerSettings(method="metropolis", target_acceptance=0.3).acceptance_goal(1) == 0.3


@pytest.mark.parametrize(
    ("values", "message"),
    [
        ({"method": "gibbs"}, "method must be one of"),
        ({"preconditioning": "dense"}, "preconditioning must be one of"),
        ({"draws": -1}, "draws must be a non-negative integer"),
        ({"warmup_iterations": 1.5}, "warmup_iterations must be a non-negative integer"),
        ({"maximum_tree_depth": 0}, "maximum_tree_depth must be between 1 and 30"),
        ({"target_acceptance": 1.0}, "strictly between 0 and 1"),
        ({"integration_time": 0.0}, "integration_time must be a positive finite number"),
        ({"divergence_threshold": float("inf")}, "divergence_threshold must be"),
        ({"initialisation": "zero"}, "initialisation must be one of"),
    ],
)
def test_bad_values_are_refused_with_a_reason(values: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        SamplerSettings(**values)


def test_round_trip_through_a_dict() -> None:
    settings = SamplerSettings(method="hmc", preconditioning="full", draws=10, jitter=False)
    assert SamplerSettings.from_dict(settings.as_dict()) == settings
    with pytest.raises(ValueError, match="unknown sampler settings: colour"):
        SamplerSettings.from_dict({"colour": "blue"})
