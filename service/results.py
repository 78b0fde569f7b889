"""Reading a finished job's results from the store: summary, diagnostics, arrays, audit record."""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

import numpy as np
from sqlalchemy import select

from service import evaluation_counts
from service.canonical import canonical_json
from service.draw_export import Selection
from service.job_queries import bad_parameter, load_job
from service.job_resources import provenance
from service.partial_results import partial_record, stop_details
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.store.arrays import decode_array
from service.store.models import TERMINAL_STATES, Chain, ChainArray, Event, Job
from service.timestamps import rfc3339

DIAGNOSTIC_FIELDS = ("name", "rhat", "bulk_ess", "tail_ess", "note")


def _readable(job: Job, what: str) -> bool:
    """Whether ``what`` ("summary", "arrays" or "complete") exists: all once succeeded; for a job
    stopped at its wall-time limit, the arrays once any chain drew and the summary once one was
    made, never "complete" (plots, which assume chains of one length)."""
    if job.state == "succeeded":
        return True
    record = partial_record(job)
    if record is None or what == "complete":
        return False
    if what == "summary":
        return job.summary is not None
    return any(record.get("draws_per_chain") or [])


def finished_job(
    runtime: Runtime, job_id: str, what: str = "complete"
) -> tuple[Job, list[Chain]]:
    """The job if its results are readable; 409 (with Retry-After while it runs) otherwise."""
    with runtime.sessions() as session:
        job, chains = load_job(session, job_id)
    if not _readable(job, what):
        headers = {"Retry-After": "2"} if job.state in ("queued", "running") else {}
        if job.state == "timed_out":
            detail = f"Job {job_id} timed out with nothing to show: {job.error}."
        else:
            detail = f"Job {job_id} is {job.state}; results exist only once it has succeeded."
        raise ApiProblem(
            409, "results-not-available", "Results are not available", detail, headers=headers
        )
    return job, chains


def is_final(job: Job) -> bool:
    """True once the job has ended: its results and status can no longer change."""
    return job.state in TERMINAL_STATES


def request_document(runtime: Runtime, job_id: str) -> tuple[dict[str, Any], dict[str, bytes]]:
    """What a job was asked to do, from the store alone, and the canonical bytes of each part
    under the job's digest scheme: the audit record's ``hashes`` are their SHA-256s.

    ``spec`` and ``data`` are what ran (a registered model's spec filled in); ``submission`` is
    the stored body (with the seed the service drew); ``request`` is the body as sent, kept from
    migration 0008 on (null before); ``settings`` are the sampler settings after defaults.
    """
    with runtime.sessions() as session:
        job, _ = load_job(session, job_id)
        stored, sent = session.execute(
            select(Job.body, Job.request_body).where(Job.id == job_id)
        ).one()
    spec, data = stored.get("model"), stored.get("data") or {}
    members = {"spec": spec, "data": data, "settings": job.settings, "submission": stored}
    if sent is not None:
        members["request"] = sent
    parts = {name: canonical_json(value, job.digest_scheme) for name, value in members.items()}
    document = {
        "job": job.id,
        "digest_scheme": job.digest_scheme,
        "hashes": _hashes(job),
        **members,
        "request": sent,
    }
    return document, parts


def _hashes(job: Job) -> dict[str, Any]:
    return {
        "scheme": job.digest_scheme,
        "request": job.request_sha256,
        "model": job.spec_sha256,
        "data": job.data_sha256,
        "run": job.run_sha256,
    }


def is_partial(job: Job) -> bool:
    """True for the results of a job stopped at its wall-time limit (draws so far only)."""
    return job.state == "timed_out"


def _partial_members(job: Job) -> dict[str, Any]:
    record = partial_record(job)
    members: dict[str, Any] = {"partial": is_partial(job)}
    if record is not None:
        members["summarised_draws_per_chain"] = record.get("summarised_draws_per_chain")
    return members


def summary_document(job: Job) -> dict[str, Any]:
    return {
        "job": job.id,
        **_partial_members(job),
        "quantities": job.summary or [],
        # joint-pattern tables of the vectors the submission's summary.patterns named (none for
        # jobs finished before they existed)
        "patterns": (job.diagnostics or {}).get("patterns") or [],
        "verdict": job.verdict,
    }


def diagnostics_document(job: Job) -> dict[str, Any]:
    diagnostics = dict(job.diagnostics or {})
    sampler = diagnostics.get("sampler_report") or diagnostics.get("sampler") or {}
    quantities = [
        {key: record.get(key) for key in DIAGNOSTIC_FIELDS} for record in (job.summary or [])
    ]
    return {
        "job": job.id,
        **_partial_members(job),
        "quantities": quantities,
        "sampler": sampler,
        "verdict": job.verdict,
    }


# A comma separates names except inside brackets, where it separates indices ("L[2,1]").
NAME_SEPARATOR = re.compile(r",(?![^\[\]]*\])")


def _parse_list(raw: str | None) -> list[str]:
    if not raw:
        return []
    return [part.strip() for part in NAME_SEPARATOR.split(raw) if part.strip()]


def _arrays(runtime: Runtime, chain_id: int, kind: str) -> list[ChainArray]:
    with runtime.sessions() as session:
        return list(
            session.scalars(
                select(ChainArray)
                .where(ChainArray.chain_id == chain_id, ChainArray.kind == kind)
                .order_by(ChainArray.name)
            ).all()
        )


def select_columns(
    available: list[str],
    chains: list[Chain],
    quantities: str | None,
    chain_list: str | None,
    thin: str | None,
    parameter: str = "quantities",
) -> Selection:
    """Which chains, columns and thinning a request asked for (1-based chain numbers)."""
    wanted = _parse_list(quantities)
    position = {name: i for i, name in enumerate(available)}
    unknown = [name for name in wanted if name not in position]
    if unknown:
        raise bad_parameter(parameter, f"No quantity named {unknown[0]!r} in this job.")
    columns = [position[name] for name in wanted] if wanted else list(range(len(available)))
    numbers = _parse_list(chain_list)
    try:
        chosen = [int(n) for n in numbers]
    except ValueError as error:
        raise bad_parameter("chains", "Chains are numbers from 1, separated by commas.") from error
    count = len(chains)
    if any(n < 1 or n > count for n in chosen):
        raise bad_parameter("chains", f"This job has chains 1 to {count}.")
    try:
        step = int(thin) if thin else 1
    except ValueError as error:
        raise bad_parameter("thin", "Thinning is a whole number of at least 1.") from error
    if step < 1:
        raise bad_parameter("thin", "Thinning is a whole number of at least 1.")
    indices = [n - 1 for n in chosen] if chosen else list(range(count))
    return Selection(indices, columns, [available[i] for i in columns], step)


def draw_loader(runtime: Runtime, chains: list[Chain]) -> Callable[[int], np.ndarray]:
    """Loads and decompresses one chain's draws when asked, so only one is in memory."""
    by_index = {chain.chain_index: chain for chain in chains}

    def load(chain_index: int) -> np.ndarray:
        rows = _arrays(runtime, by_index[chain_index].id, "draws")
        return decode_array(rows[0].data, rows[0].sha256)

    return load


def draw_columns(runtime: Runtime, chains: list[Chain]) -> list[str]:
    with runtime.sessions() as session:
        columns = session.scalar(
            select(ChainArray.columns).where(
                ChainArray.chain_id == chains[0].id, ChainArray.kind == "draws"
            )
        )
    return list(columns or [])


def stat_names(runtime: Runtime, chains: list[Chain]) -> list[str]:
    with runtime.sessions() as session:
        names = session.scalars(
            select(ChainArray.name)
            .where(ChainArray.chain_id == chains[0].id, ChainArray.kind == "stat")
            .order_by(ChainArray.name)
        ).all()
    return list(names)


def stat_loader(runtime: Runtime, chains: list[Chain], names: list[str]) -> Callable:
    """One chain's statistics as a float64 matrix (columns in ``names`` order; booleans 0/1)."""
    by_index = {chain.chain_index: chain for chain in chains}

    def load(chain_index: int) -> np.ndarray:
        rows = {row.name: row for row in _arrays(runtime, by_index[chain_index].id, "stat")}
        columns = [
            np.asarray(decode_array(rows[n].data, rows[n].sha256), dtype=np.float64).reshape(-1)
            for n in names
        ]
        return np.column_stack(columns) if columns else np.zeros((0, 0))

    return load


def _seed_records(seed: int, count: int) -> list[dict[str, Any]]:
    from worker import runner

    return [
        {"chain": i + 1, "entropy": int(s.entropy), "spawn_key": [int(k) for k in s.spawn_key]}
        for i, s in enumerate(runner.chain_seeds(seed, count))
    ]


def audit_document(runtime: Runtime, job_id: str) -> dict[str, Any]:
    with runtime.sessions() as session:
        job, chains = load_job(session, job_id)
        log = session.scalars(select(Event).where(Event.job_id == job_id).order_by(Event.id)).all()
        arrays = session.execute(
            select(
                ChainArray.chain_id,
                ChainArray.kind,
                ChainArray.name,
                ChainArray.sha256,
                ChainArray.shape,
            ).where(ChainArray.chain_id.in_([c.id for c in chains]))
        ).all()
    draws = {row.chain_id: row for row in arrays if row.kind == "draws"}
    stats: dict[int, dict[str, str]] = {}
    for row in arrays:
        if row.kind == "stat":
            stats.setdefault(row.chain_id, {})[row.name] = row.sha256
    stops = stop_details(runtime, job_id)
    thresholds = (job.verdict or {}).get("thresholds")
    if thresholds is None:
        with runtime.sessions() as session:
            body = session.scalar(select(Job.body).where(Job.id == job_id))
        thresholds = (body or {}).get("checks")
    return {
        "job": job.id,
        "submitted_by": job.submitted_by,
        "submitted_at": rfc3339(job.created_at),
        "idempotency_key": job.idempotency_key,
        "events": [
            {
                "at": rfc3339(event.at),
                "kind": event.kind,
                "chain": None if event.chain_index is None else event.chain_index + 1,
                "state": event.state,
                "detail": event.detail,
            }
            for event in log
        ],
        # SHA-256s of the canonical JSON (the scheme named) of the parts GET .../request serves.
        "hashes": _hashes(job),
        **provenance(job),
        "seed": job.seed,
        "chain_seeds": _seed_records(job.seed, job.chain_count),
        "settings": job.settings,
        "checks": thresholds,
        "software": {"api": job.api_software, "finish": job.finish_software},
        "partial": is_partial(job),
        "chains": [
            {
                "chain": chain.chain_index + 1,
                "state": chain.state,
                "attempts": chain.attempts,
                "duplicate_deliveries": chain.duplicate_deliveries,
                "worker": {
                    "host": chain.worker_host,
                    "pid": chain.worker_pid,
                    "software": chain.worker_software,
                },
                "started_at": rfc3339(chain.started_at),
                "finished_at": rfc3339(chain.finished_at),
                "iteration": chain.iteration,
                "iterations_total": chain.iterations_total,
                "evaluations": evaluation_counts.as_document(chain),
                # The limit the worker applied when it stopped the chain; null unless it did.
                "time_limit_seconds": stops.get(chain.chain_index, {}).get("time_limit_seconds"),
                "draws_sha256": draws[chain.id].sha256 if chain.id in draws else None,
                "draws_shape": draws[chain.id].shape if chain.id in draws else None,
                "stats_sha256": stats.get(chain.id, {}),
            }
            for chain in chains
        ],
    }
