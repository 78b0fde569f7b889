"""The finishing step of a job: every chain has ended; summarise, judge, and close the job."""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
from sqlalchemy import select, update
from sqlalchemy.orm import undefer

from service import evaluation_counts, events
from service.callbacks import queue_callback_safely
from service.metrics import JOBS_FINISHED
from service.partial_results import summarise_partial
from service.runtime import Runtime
from service.store.arrays import decode_array
from service.store.engine import transaction
from service.store.models import TERMINAL_STATES, Chain, ChainArray, Job, utc_now
from service.stored_draws import StoredDraws
from service.versions import software_versions

log = logging.getLogger(__name__)


def load_chain_result(
    runtime: Runtime, chain_id: int, adapted: dict | None, evaluations: Any = None
) -> Any:
    """A stored chain as the engine's ChainResult without its draws: its statistics (checksums
    verified on the way out), names, adapted settings and ``evaluations`` (the chain row's counts,
    service/evaluation_counts.py). ``values`` is an empty (draws, 0) array that gives the number of
    draws: the draws themselves are read a quantity at a time (service/stored_draws.py)."""
    from worker.runner import ChainResult

    with runtime.sessions() as session:
        stats = {
            row.name: decode_array(row.data, row.sha256)
            for row in session.scalars(
                select(ChainArray).where(ChainArray.chain_id == chain_id, ChainArray.kind == "stat")
            )
        }
        draws = session.execute(
            select(ChainArray.columns, ChainArray.shape).where(
                ChainArray.chain_id == chain_id, ChainArray.kind == "draws"
            )
        ).one()
    return ChainResult(
        names=list(draws.columns or []),
        values=np.empty((int(draws.shape[0]), 0)),
        stats=stats,
        adapted=adapted or {},
        completed=True,
        evaluations=evaluations,
    )


def load_chain_results(runtime: Runtime, chains: list[Chain], with_counts: bool) -> list[Any]:
    """Every chain's ChainResult as ``load_chain_result`` gives it."""
    return [
        load_chain_result(
            runtime,
            chain.id,
            chain.adapted,
            evaluation_counts.engine_counts(chain) if with_counts else None,
        )
        for chain in chains
    ]


def _close(runtime: Runtime, job_id: str, state: str, **values: Any) -> bool:
    with transaction(runtime.sessions) as session:
        done = session.execute(
            update(Job)
            .where(Job.id == job_id, Job.state.not_in(TERMINAL_STATES))
            .values(
                state=state, finished_at=utc_now(), finish_software=software_versions(), **values
            )
            .execution_options(synchronize_session=False)
        ).rowcount
        if done:
            detail = {"error": values["error"]} if values.get("error") else None
            events.record(session, job_id, "job_state", state, detail=detail)
    if done:
        JOBS_FINISHED.labels(state).inc()
        queue_callback_safely(runtime, job_id)
    return bool(done)


def finish(runtime: Runtime, job_id: str) -> str:
    """Close the job once all its chains have ended; safe to run more than once."""
    from worker import runner

    with runtime.sessions() as session:
        job = session.scalars(
            select(Job).where(Job.id == job_id).options(undefer(Job.body))
        ).one_or_none()
        chains = session.scalars(
            select(Chain).where(Chain.job_id == job_id).order_by(Chain.chain_index)
        ).all()
    if job is None or job.state in TERMINAL_STATES:
        return "nothing to do"
    if any(chain.state not in TERMINAL_STATES for chain in chains):
        return "chains still running"
    if job.cancel_requested_at is not None:
        _close(runtime, job_id, "cancelled")
        return "cancelled"
    failed = [chain for chain in chains if chain.state not in ("succeeded", "timed_out")]
    if failed:
        reasons = "; ".join(
            f"chain {c.chain_index + 1} {c.state}: {c.error or 'no reason recorded'}"
            for c in failed
        )
        _close(runtime, job_id, "failed", error=reasons)
        return "failed"
    if any(chain.state == "timed_out" for chain in chains):
        return _finish_partial(runtime, job, chains)
    try:
        results = load_chain_results(runtime, chains, with_counts=True)
        with StoredDraws(runtime, [chain.id for chain in chains]) as draws:
            outcome = runner.finish_job(job.body, results, draws)
    except Exception as error:
        log.exception("finishing job %s failed", job_id)
        _close(runtime, job_id, "failed", error=f"{type(error).__name__}: {error}")
        return "failed"
    diagnostics = {key: value for key, value in outcome.items() if key != "summary"}
    _close(
        runtime,
        job_id,
        "succeeded",
        summary=outcome.get("summary"),
        diagnostics=diagnostics,
        verdict=outcome.get("verdict"),
    )
    return "succeeded"


def _finish_partial(runtime: Runtime, job: Job, chains: list[Chain]) -> str:
    """Close a job a chain of which hit its wall-time limit: ``timed_out``, with what it drew."""
    try:
        results = load_chain_results(runtime, chains, with_counts=False)
        closing = summarise_partial(runtime, job, chains, results)
    except Exception as error:
        log.exception("finishing timed-out job %s failed", job.id)
        _close(runtime, job.id, "failed", error=f"{type(error).__name__}: {error}")
        return "failed"
    _close(runtime, job.id, "timed_out", **closing)
    return "timed_out"
