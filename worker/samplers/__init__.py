"""Samplers on the unconstrained space: NUTS, static HMC and adaptive random-walk Metropolis."""

from worker.samplers.chain import Chain, ChainOutput, EvaluationCounts
from worker.samplers.initialisation import InitialisationError
from worker.samplers.settings import SamplerSettings
from worker.samplers.snapshot import SnapshotError
from worker.samplers.target import Target

__all__ = [
    "Chain",
    "ChainOutput",
    "EvaluationCounts",
    "InitialisationError",
    "SamplerSettings",
    "SnapshotError",
    "Target",
]
