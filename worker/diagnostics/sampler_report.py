"""Per-chain sampler statistics gathered into one report: divergences, tree depth, acceptance,
E-BFMI. Statistics a method does not produce (Metropolis has no energy) are reported as None."""

from __future__ import annotations

import numpy as np

from worker.diagnostics.energy import ebfmi


def _finite_or_none(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def sampler_checks(stats: list[dict[str, np.ndarray]], maximum_tree_depth: int | None) -> dict:
    """Summarise each chain's per-draw statistics (sampling phase only) into a JSON-able report.

    ``stats[c]`` holds arrays such as ``divergent``, ``doublings`` (tree depth),
    ``accept_probability`` and ``energy`` for chain ``c``; a draw counts as hitting the depth
    limit when its tree depth reaches
    ``maximum_tree_depth`` (None when the method builds no trees).
    """
    has_divergent = bool(stats) and all("divergent" in s for s in stats)
    has_depth = (
        bool(stats) and maximum_tree_depth is not None and all("doublings" in s for s in stats)
    )
    divergences = (
        [int(np.count_nonzero(np.asarray(s["divergent"]))) for s in stats]
        if has_divergent
        else None
    )
    depth_hits = (
        [int(np.count_nonzero(np.asarray(s["doublings"]) >= maximum_tree_depth)) for s in stats]
        if has_depth
        else None
    )
    acceptance = [
        _finite_or_none(np.mean(s["accept_probability"]))
        if len(s.get("accept_probability", ()))
        else None
        for s in stats
    ]
    energies = [_finite_or_none(ebfmi(s["energy"])) if "energy" in s else None for s in stats]
    draws = [int(max((len(np.atleast_1d(v)) for v in s.values()), default=0)) for s in stats]
    return {
        "chains": len(stats),
        "draws_per_chain": draws,
        "divergences": sum(divergences) if divergences is not None else None,
        "divergences_per_chain": divergences,
        "maximum_tree_depth": maximum_tree_depth,
        "tree_depth_hits": sum(depth_hits) if depth_hits is not None else None,
        "tree_depth_hits_per_chain": depth_hits,
        "mean_acceptance_per_chain": acceptance,
        "ebfmi_per_chain": energies,
    }
