"""Closing a job that hit its wall-time limit: a summary over the draws so far, marked partial.

A chain stopped by ``DRAWYARD_CHAIN_TIME_LIMIT`` keeps the sampling-phase draws it made. Chains
stop at different iterations, so the summary and diagnostics use the common prefix: the first
``n`` draws of every chain, ``n`` the shortest chain's count. Every chain's stored draws are served
as they are. The verdict always fails, with a check naming the reason, because diagnostics of an
incomplete run say nothing about the run that was asked for.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sqlalchemy import select

from service.runtime import Runtime
from service.store.models import Chain, Event, Job
from service.stored_draws import StoredDraws
from worker.diagnostics.splitting import MIN_DRAWS_PER_CHAIN

WALL_TIME_CHECK = "wall_time_limit"
# Fewer draws per chain than this leaves split-R-hat halves of one draw, where no variance exists
# (the engine's own floor, worker/diagnostics/splitting.py): below it there is nothing to summarise.
MIN_SUMMARISED_DRAWS = MIN_DRAWS_PER_CHAIN


def stop_details(runtime: Runtime, job_id: str) -> dict[int, dict[str, Any]]:
    """Per 0-based chain index, what its ``timed_out`` event recorded (limit, iteration, draws)."""
    with runtime.sessions() as session:
        rows = session.execute(
            select(Event.chain_index, Event.detail).where(
                Event.job_id == job_id, Event.kind == "chain_state", Event.state == "timed_out"
            )
        ).all()
    return {row.chain_index: dict(row.detail or {}) for row in rows if row.chain_index is not None}


def _limit_seconds(details: dict[int, dict[str, Any]], fallback: int) -> int:
    limits = [d["time_limit_seconds"] for d in details.values() if "time_limit_seconds" in d]
    return int(max(limits)) if limits else int(fallback)


def _truncated(result: Any, length: int) -> Any:
    from worker.runner import ChainResult

    return ChainResult(
        names=list(result.names),
        values=np.asarray(result.values)[:length],
        stats={name: np.asarray(v)[:length] for name, v in dict(result.stats).items()},
        adapted=result.adapted,
        completed=True,
    )


def _check(limit: int, timed_out: list[int], summarised: int | None, requested: int) -> dict:
    chains = ", ".join(str(c) for c in timed_out)
    which = f"chain {chains}" if len(timed_out) == 1 else f"chains {chains}"
    if summarised is None:
        use = "there are too few draws to summarise"
    else:
        use = (
            f"the summary uses the first {summarised} of {requested} requested draws per chain, "
            "so these diagnostics describe an incomplete run"
        )
    return {
        "check": WALL_TIME_CHECK,
        "quantity": None,
        "chain": timed_out[0] if len(timed_out) == 1 else None,
        "value": None if summarised is None else float(summarised),
        "threshold": float(limit),
        "message": (
            f"The job stopped at its wall-time limit of {limit} s ({which} did not finish); "
            f"the draws are partial and {use}."
        ),
    }


def _reason(limit: int, lengths: list[int], summarised: int | None) -> str:
    if summarised is not None:
        return (
            f"the job stopped at its wall-time limit of {limit} s; its draws are partial: the "
            f"summary and diagnostics use the first {summarised} draws of each chain"
        )
    if not any(lengths):
        return (
            f"the job stopped at its wall-time limit of {limit} s during warm-up, before any "
            "draw was made; raise DRAWYARD_CHAIN_TIME_LIMIT or ask for fewer warm-up "
            "iterations or draws"
        )
    shortest = min(range(len(lengths)), key=lengths.__getitem__)
    return (
        f"the job stopped at its wall-time limit of {limit} s; chain {shortest + 1} has "
        f"{lengths[shortest]} draws, fewer than the {MIN_SUMMARISED_DRAWS} per chain a summary "
        "needs, so there is no summary (the draws so far can be downloaded); raise "
        "DRAWYARD_CHAIN_TIME_LIMIT or ask for fewer warm-up iterations or draws"
    )


def summarise_partial(
    runtime: Runtime, job: Job, chains: list[Chain], results: list[Any]
) -> dict[str, Any]:
    """The job columns (summary, diagnostics, verdict, error) of a job that timed out."""
    from worker import runner
    from worker.diagnostics import resolve_thresholds

    details = stop_details(runtime, job.id)
    limit = _limit_seconds(details, runtime.settings.chain_time_limit)
    timed_out = [c.chain_index + 1 for c in chains if c.state == "timed_out"]
    lengths = [int(np.asarray(r.values).shape[0]) for r in results]
    requested = int((job.settings or {}).get("draws") or max(lengths, default=0))
    common = min(lengths, default=0)
    summarised = common if common >= MIN_SUMMARISED_DRAWS else None
    record = {
        "time_limit_seconds": limit,
        "timed_out_chains": timed_out,
        "draws_per_chain": lengths,
        "draws_requested_per_chain": requested,
        "summarised_draws_per_chain": summarised,
        "iteration_per_chain": [c.iteration for c in chains],
    }
    check = _check(limit, timed_out, summarised, requested)
    if summarised is None:
        verdict = {
            "passed": False,
            "failed_checks": [check],
            "thresholds": resolve_thresholds((job.body or {}).get("checks")),
        }
        return {
            "summary": None,
            "diagnostics": {"partial": record},
            "verdict": verdict,
            "error": _reason(limit, lengths, None),
        }
    with StoredDraws(runtime, [c.id for c in chains], summarised) as draws:
        outcome = runner.finish_job(job.body, [_truncated(r, summarised) for r in results], draws)
    verdict = dict(outcome["verdict"])
    verdict["failed_checks"] = [check, *verdict.get("failed_checks", [])]
    verdict["passed"] = False
    return {
        "summary": outcome["summary"],
        "diagnostics": {
            "sampler": outcome["sampler"],
            "verdict": verdict,
            "partial": record,
            "patterns": outcome["patterns"],
        },
        "verdict": verdict,
        "error": _reason(limit, lengths, summarised),
    }


def partial_record(job: Job) -> dict[str, Any] | None:
    """What the finishing step recorded about a timed-out job's partial draws, or None."""
    return (job.diagnostics or {}).get("partial") if job.state == "timed_out" else None
