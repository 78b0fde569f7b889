"""A chain's evaluations of the model, between the engine's counts, the chain row and the API.

The engine counts by phase (worker/samplers/chain.py, EvaluationCounts): evaluations of the log
density with its gradient, and of the log density alone (random-walk Metropolis has no gradient).
The store keeps them in four nullable columns of the chain row (migration 0005).
"""

from __future__ import annotations

from typing import Any

from service.store.models import Chain

PHASES = ("warmup", "sampling")
KINDS = ("gradient", "log_density")


def _column(kind: str, phase: str) -> str:
    return f"{phase}_{kind}_evaluations"


COLUMNS = tuple(_column(kind, phase) for kind in KINDS for phase in PHASES)


def row_values(counts: Any) -> dict[str, int | None]:
    """Chain-row values for the engine's counts (None for all when the engine does not know)."""
    if counts is None:
        return dict.fromkeys(COLUMNS)
    by_kind = {"gradient": counts.gradient, "log_density": counts.log_density}
    return {_column(k, p): int(by_kind[k][p]) for k in KINDS for p in PHASES}


def as_document(chain: Chain) -> dict[str, dict[str, int]] | None:
    """``{"gradient": {"warmup": n, "sampling": n}, "log_density": {...}}``; None if not counted."""
    values = {name: getattr(chain, name) for name in COLUMNS}
    if any(value is None for value in values.values()):
        return None
    return {k: {p: int(values[_column(k, p)]) for p in PHASES} for k in KINDS}


def engine_counts(chain: Chain) -> Any:
    """The row's counts as the engine's EvaluationCounts, or None."""
    from worker.samplers import EvaluationCounts

    document = as_document(chain)
    if document is None:
        return None
    return EvaluationCounts(gradient=document["gradient"], log_density=document["log_density"])
