"""A finished job's draws and divergence flags as arrays shaped for plotting."""

from __future__ import annotations

import numpy as np

from service.results import draw_columns, draw_loader, stat_loader, stat_names
from service.runtime import Runtime
from service.store.models import Chain


def quantity_names(runtime: Runtime, chains: list[Chain]) -> list[str]:
    return draw_columns(runtime, chains)


def quantity_draws(runtime: Runtime, chains: list[Chain], names: list[str]) -> np.ndarray:
    """``(chains, draws, len(names))`` for the named quantities (names must exist)."""
    available = draw_columns(runtime, chains)
    columns = [available.index(name) for name in names]
    load = draw_loader(runtime, chains)
    return np.stack([load(c.chain_index)[:, columns] for c in chains])


def divergent_draws(runtime: Runtime, chains: list[Chain]) -> np.ndarray | None:
    """``(chains, draws)`` booleans, or None when the sampler records no divergences."""
    if "divergent" not in stat_names(runtime, chains):
        return None
    load = stat_loader(runtime, chains, ["divergent"])
    return np.stack([load(c.chain_index)[:, 0] != 0 for c in chains])
