"""Reading jobs: one by id, or a filtered page with an opaque cursor; and cancelling one."""

from __future__ import annotations

import base64
import binascii
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass

from sqlalchemy import or_, select, update
from sqlalchemy.orm import Session

from service import events
from service.access.tenancy import visible_jobs
from service.callbacks import queue_callback_safely
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.store.engine import transaction
from service.store.models import JOB_STATES, TERMINAL_STATES, Chain, Job, JobLabel, utc_now

CURSOR_PREFIX = "jobs-before:"

# The quality verdict a job carries: "passed" or "failed" once judged, "none" before (or when it
# ended without one: failed, cancelled).
VERDICTS = ("passed", "failed", "none")
VERDICT_CONDITIONS = {
    "passed": lambda: Job.verdict["passed"].as_boolean().is_(True),
    "failed": lambda: Job.verdict["passed"].as_boolean().is_(False),
    # SQL NULL and JSON null alike give no member
    "none": lambda: Job.verdict["passed"].as_boolean().is_(None),
}


def not_found(job_id: str) -> ApiProblem:
    return ApiProblem(404, "job-not-found", "No such job", f"There is no job with id '{job_id}'.")


def load_job(session: Session, job_id: str) -> tuple[Job, list[Chain]]:
    job = session.scalars(select(Job).where(Job.id == job_id, *visible_jobs())).one_or_none()
    if job is None:
        raise not_found(job_id)
    chains = session.scalars(
        select(Chain).where(Chain.job_id == job_id).order_by(Chain.chain_index)
    ).all()
    return job, list(chains)


def get_job(runtime: Runtime, job_id: str) -> tuple[Job, list[Chain]]:
    with runtime.sessions() as session:
        return load_job(session, job_id)


def encode_cursor(seq: int) -> str:
    return base64.urlsafe_b64encode(f"{CURSOR_PREFIX}{seq}".encode()).decode().rstrip("=")


def decode_cursor(cursor: str) -> int:
    try:
        padded = cursor + "=" * (-len(cursor) % 4)
        text = base64.urlsafe_b64decode(padded.encode()).decode()
        if not text.startswith(CURSOR_PREFIX):
            raise ValueError(text)
        return int(text.removeprefix(CURSOR_PREFIX))
    except (ValueError, binascii.Error, UnicodeDecodeError) as error:
        raise bad_parameter("cursor", "The cursor is not one this service gave out.") from error


def bad_parameter(name: str, message: str) -> ApiProblem:
    return ApiProblem(
        400,
        "invalid-query",
        "Invalid query parameter",
        f"The query parameter '{name}' is not valid.",
        [{"parameter": name, "message": message}],
    )


@dataclass(frozen=True)
class JobFilter:
    states: tuple[str, ...] = ()
    labels: tuple[tuple[str, str], ...] = ()
    verdicts: tuple[str, ...] = ()

    @classmethod
    def parse(
        cls, states: Sequence[str], labels: Sequence[str], verdicts: Sequence[str] = ()
    ) -> JobFilter:
        wanted = tuple(s for raw in states for s in raw.split(",") if s)
        unknown = [s for s in wanted if s not in JOB_STATES]
        if unknown:
            raise bad_parameter(
                "state", f"Unknown state {unknown[0]!r}; the states are {', '.join(JOB_STATES)}."
            )
        pairs = []
        for raw in labels:
            key, sep, value = raw.partition(":")
            if not sep or not key:
                raise bad_parameter("label", f"Expected label=key:value, got {raw!r}.")
            if "\x00" in raw:
                # No stored label holds one, and PostgreSQL refuses NUL in a text parameter.
                raise bad_parameter("label", "A label filter cannot hold a NUL character.")
            pairs.append((key, value))
        judged = tuple(v for raw in verdicts for v in raw.split(",") if v)
        unknown = [v for v in judged if v not in VERDICTS]
        if unknown:
            raise bad_parameter(
                "verdict",
                f"Unknown verdict {unknown[0]!r}; the verdicts are {', '.join(VERDICTS)}.",
            )
        return cls(wanted, tuple(pairs), judged)


def list_jobs(
    runtime: Runtime, where: JobFilter, limit: int, cursor: str | None
) -> tuple[list[tuple[Job, list[Chain]]], str | None]:
    """A page of jobs, newest first, and the cursor of the next page (None on the last)."""
    statement = select(Job).where(*visible_jobs()).order_by(Job.seq.desc()).limit(limit + 1)
    if cursor:
        statement = statement.where(Job.seq < decode_cursor(cursor))
    if where.states:
        statement = statement.where(Job.state.in_(where.states))
    if where.verdicts:
        statement = statement.where(or_(*(VERDICT_CONDITIONS[v]() for v in where.verdicts)))
    for key, value in where.labels:
        statement = statement.where(
            select(JobLabel.job_id)
            .where(JobLabel.job_id == Job.id, JobLabel.key == key, JobLabel.value == value)
            .exists()
        )
    with runtime.sessions() as session:
        jobs = list(session.scalars(statement).all())
        more = len(jobs) > limit
        jobs = jobs[:limit]
        chains: dict[str, list[Chain]] = defaultdict(list)
        if jobs:
            rows = session.scalars(
                select(Chain)
                .where(Chain.job_id.in_([job.id for job in jobs]))
                .order_by(Chain.chain_index)
            ).all()
            for chain in rows:
                chains[chain.job_id].append(chain)
    next_cursor = encode_cursor(jobs[-1].seq) if more and jobs else None
    return [(job, chains[job.id]) for job in jobs], next_cursor


def cancel_job(runtime: Runtime, job_id: str) -> tuple[Job, list[Chain]]:
    """Flag the job cancelled: queued chains end now, running ones stop at their next check."""
    now = utc_now()
    with transaction(runtime.sessions) as session:
        job, _ = load_job(session, job_id)
        if job.state in TERMINAL_STATES:
            return load_job(session, job_id)
        flagged = session.execute(
            update(Job)
            .where(Job.id == job_id, Job.cancel_requested_at.is_(None))
            .values(cancel_requested_at=now)
            .execution_options(synchronize_session=False)
        ).rowcount
        if flagged:
            events.record(session, job_id, "cancel_requested")
        queued = session.scalars(
            select(Chain.chain_index).where(Chain.job_id == job_id, Chain.state == "queued")
        ).all()
        session.execute(
            update(Chain)
            .where(Chain.job_id == job_id, Chain.state == "queued")
            .values(state="cancelled", finished_at=now, updated_at=now)
            .execution_options(synchronize_session=False)
        )
        for index in queued:
            events.record(session, job_id, "chain_state", "cancelled", index)
        running = session.scalar(
            select(Chain.id)
            .where(Chain.job_id == job_id, Chain.state.not_in(TERMINAL_STATES))
            .limit(1)
        )
        if running is None:
            # No chain will report back, so the job ends here rather than in a finishing task.
            closed = session.execute(
                update(Job)
                .where(Job.id == job_id, Job.state.not_in(TERMINAL_STATES))
                .values(state="cancelled", finished_at=now, finish_enqueued_at=now)
                .execution_options(synchronize_session=False)
            ).rowcount
            if closed:
                events.record(session, job_id, "job_state", "cancelled")
    if running is None and closed:
        queue_callback_safely(runtime, job_id)
    return get_job(runtime, job_id)
