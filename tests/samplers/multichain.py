"""Running several independent chains of one target, as the runner does (SeedSequence.spawn)."""

from __future__ import annotations

import numpy as np

from worker.samplers import Chain, ChainOutput, SamplerSettings
from worker.samplers.target import Target


def run_chains(
    target: Target, settings: SamplerSettings, seed: int, chains: int = 4
) -> tuple[np.ndarray, list[ChainOutput]]:
    """Draws as (chains, draws, dimension) and each chain's output."""
    outputs = [
        Chain(target, settings, child).run() for child in np.random.SeedSequence(seed).spawn(chains)
    ]
    return np.stack([out.draws for out in outputs]), outputs
