"""Sampler settings: one frozen record per chain, with the defaults of docs/samplers.md."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

METHODS = ("nuts", "hmc", "metropolis")
PRECONDITIONINGS = ("none", "per_coordinate", "full")
INITIALISATIONS = ("random", "optimise", "given")


@dataclass(frozen=True)
class SamplerSettings:
    """What one chain does; validated on construction so a bad value fails before any work."""

    method: str = "nuts"
    warmup_iterations: int = 1000
    draws: int = 1000
    target_acceptance: float | None = None
    maximum_tree_depth: int = 10
    preconditioning: str = "per_coordinate"
    integration_time: float = 1.0
    jitter: bool = True
    divergence_threshold: float = 1000.0
    initialisation: str = "random"
    start_spread: float = 2.0

    def __post_init__(self) -> None:
        problems = settings_problems(self)
        if problems:
            raise ValueError("; ".join(problems))

    def acceptance_goal(self, dimension: int) -> float:
        """The target acceptance with the method's default filled in.

        Hamiltonian samplers default to 0.8 (Hoffman & Gelman 2014, section 3.2, where values
        near 0.6-0.9 work well). Random-walk Metropolis defaults to 0.234 for d > 1 and 0.44 for
        d = 1 (Roberts, Gelman & Gilks 1997).
        """
        if self.target_acceptance is not None:
            return float(self.target_acceptance)
        if self.method == "metropolis":
            return 0.44 if dimension == 1 else 0.234
        return 0.8

    def as_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, values: dict[str, Any]) -> SamplerSettings:
        known = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise ValueError(f"unknown sampler settings: {', '.join(unknown)}")
        return cls(**values)


def settings_problems(s: SamplerSettings) -> list[str]:
    """Every problem with a settings record, as sentences (empty when valid)."""
    problems: list[str] = []
    if s.method not in METHODS:
        problems.append(f"method must be one of {', '.join(METHODS)}, got {s.method!r}")
    if s.preconditioning not in PRECONDITIONINGS:
        problems.append(
            f"preconditioning must be one of {', '.join(PRECONDITIONINGS)}, "
            f"got {s.preconditioning!r}"
        )
    if s.initialisation not in INITIALISATIONS:
        problems.append(
            f"initialisation must be one of {', '.join(INITIALISATIONS)}, got {s.initialisation!r}"
        )
    for name in ("warmup_iterations", "draws", "maximum_tree_depth"):
        value = getattr(s, name)
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            problems.append(f"{name} must be a non-negative integer, got {value!r}")
    if isinstance(s.maximum_tree_depth, int) and not 1 <= s.maximum_tree_depth <= 30:
        problems.append(
            f"maximum_tree_depth must be between 1 and 30, got {s.maximum_tree_depth!r}"
        )
    if s.target_acceptance is not None and not (
        _is_number(s.target_acceptance) and 0.0 < s.target_acceptance < 1.0
    ):
        problems.append(
            f"target_acceptance must be strictly between 0 and 1, got {s.target_acceptance!r}"
        )
    for name in ("integration_time", "divergence_threshold", "start_spread"):
        value = getattr(s, name)
        if not (_is_number(value) and math.isfinite(value) and value > 0):
            problems.append(f"{name} must be a positive finite number, got {value!r}")
    if not isinstance(s.jitter, bool):
        problems.append(f"jitter must be true or false, got {s.jitter!r}")
    return problems


def _is_number(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)
