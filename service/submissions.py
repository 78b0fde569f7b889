"""Accepting a job: validate everything, then store it and queue its chains, or refuse it whole."""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError

from service import events
from service.access.limits import check_active_jobs, unknown_count_problems
from service.access.tenancy import current_key_id, current_tenant, scoped_idempotency_key
from service.callbacks import notify_problems
from service.canonical import sha256_of_json
from service.config import Settings
from service.dispatch import send_chain_tasks
from service.problem_details import ApiProblem
from service.runtime import Runtime
from service.schemas import schema_problems
from service.store.engine import transaction
from service.store.models import Chain, Job, JobLabel, utc_now
from service.versions import software_versions
from worker.problems import Problem


@dataclass(frozen=True)
class Accepted:
    job: Job
    created: bool  # False when an Idempotency-Key replay returned an existing job


def invalid(problems: list[Problem]) -> ApiProblem:
    count = len(problems)
    return ApiProblem(
        422,
        "invalid-submission",
        "The submission is not valid",
        f"{count} problem{'s' if count != 1 else ''} found; nothing was stored or queued.",
        problems,
    )


def fresh_seed() -> int:
    """A seed from the operating system's entropy, for submissions that do not give one."""
    state = np.random.SeedSequence().generate_state(1, dtype=np.uint64)[0]
    return int(state >> np.uint64(1))


def validate(body: Any, settings: Settings) -> tuple[dict[str, Any], dict[str, Any]]:
    """The body as stored (seed filled in) and the resolved sampler settings, or ApiProblem."""
    from worker import runner

    problems = schema_problems("submission", body)
    if isinstance(body, dict) and (too_big := unknown_count_problems(body, settings)):
        raise invalid(too_big)
    if isinstance(body, dict):
        # The engine checks the model against its schema and then semantically, reporting every
        # problem; ours would stop at the first layer, so the model part is left to it.
        problems = [p for p in problems if not _under(p.pointer, "/model")]
        problems = _merged(
            problems, runner.check_submission(body, settings.max_chains, settings.max_draws)
        )
        problems = _merged(problems, notify_problems(body, settings))
    if problems:
        raise invalid(problems)
    stored = dict(body)
    sampler = dict(body.get("sampler") or {})
    sampler.setdefault("seed", fresh_seed())
    stored["sampler"] = sampler
    resolved = dict(runner.resolve_sampler(sampler))
    problems = _limit_problems(resolved, settings) + unknown_count_problems(body, settings)
    if problems:
        raise invalid(problems)
    return stored, resolved


def _under(where: str, root: str) -> bool:
    return where == root or where.startswith(root + "/")


def _merged(first: list[Problem], second: list[Problem]) -> list[Problem]:
    """Both lists, without a second report of a place already reported."""
    seen = {p.pointer for p in first}
    return first + [p for p in second if p.pointer not in seen]


def _limit_problems(resolved: dict[str, Any], settings: Settings) -> list[Problem]:
    # The engine bounds warm-up and draws one by one; this service bounds their sum as well.
    problems = []
    iterations = int(resolved.get("warmup_iterations", 0)) + int(resolved.get("draws", 0))
    if iterations > settings.max_draws:
        problems.append(
            Problem(
                "/sampler/draws",
                f"Warm-up plus draws is {iterations} iterations per chain; this service allows "
                f"at most {settings.max_draws}.",
            )
        )
    return problems


def existing_for_key(runtime: Runtime, key: str, request_sha256: str) -> Job | None:
    """The job an Idempotency-Key already made, or None; 409 when the body differs."""
    with runtime.sessions() as session:
        job = session.scalars(select(Job).where(Job.idempotency_key == key)).one_or_none()
    if job is None:
        return None
    if job.request_sha256 != request_sha256:
        raise ApiProblem(
            409,
            "idempotency-key-reused",
            "Idempotency-Key already used for a different request",
            f"The key was used for job {job.id} with a different body; use a new key for a new "
            "job.",
        )
    return job


def submit(runtime: Runtime, body: Any, idempotency_key: str | None) -> Accepted:
    """Validate, store and queue a submission (or return the job its idempotency key made)."""
    try:
        request_sha256 = sha256_of_json(body)
    except ValueError as error:
        # NaN or infinity: the parser takes them, JSON has no such numbers. Validation names
        # where they are; anywhere it does not look is refused as a whole.
        validate(body, runtime.settings)
        raise ApiProblem(
            422, "invalid-submission", "The submission is not valid",
            "The body holds NaN or infinity, which JSON has no way to write.",
            [{"pointer": "", "message": "NaN and infinity are not JSON numbers."}],
        ) from error
    idempotency_key = scoped_idempotency_key(idempotency_key)
    if idempotency_key is not None:
        job = existing_for_key(runtime, idempotency_key, request_sha256)
        if job is not None:
            return Accepted(job, created=False)
    stored, resolved = validate(body, runtime.settings)
    check_active_jobs(runtime, current_tenant())
    chains = int(resolved["chains"])
    iterations_total = int(resolved.get("warmup_iterations", 0)) + int(resolved.get("draws", 0))
    now = utc_now()
    job = Job(
        id=uuid.uuid4().hex,
        state="queued",
        created_at=now,
        chain_count=chains,
        seed=int(stored["sampler"]["seed"]),
        body=stored,
        settings=resolved,
        labels=dict(body.get("labels") or {}),
        request_sha256=request_sha256,
        spec_sha256=sha256_of_json(body["model"]),
        data_sha256=sha256_of_json(body.get("data") or {}),
        idempotency_key=idempotency_key,
        submitted_by=current_key_id(),
        tenant=current_tenant(),
        api_software=software_versions(),
    )
    try:
        with transaction(runtime.sessions) as session:
            session.add(job)
            session.flush()
            session.add_all(JobLabel(job_id=job.id, key=k, value=v) for k, v in job.labels.items())
            session.add_all(
                Chain(
                    job_id=job.id,
                    chain_index=index,
                    state="queued",
                    attempts=0,
                    duplicate_deliveries=0,
                    iteration=0,
                    divergences=0,
                    iterations_total=iterations_total,
                    updated_at=now,
                )
                for index in range(chains)
            )
            events.record(session, job.id, "job_state", "queued")
    except IntegrityError:
        # Two requests with the same new key raced; the other one stored its job first.
        if idempotency_key is None:
            raise
        existing = existing_for_key(runtime, idempotency_key, request_sha256)
        if existing is None:
            raise
        return Accepted(existing, created=False)
    try:
        send_chain_tasks(runtime.celery, runtime.settings.queue, job.id, chains)
    except Exception as error:
        with transaction(runtime.sessions) as session:
            session.execute(
                Job.__table__.update()
                .where(Job.id == job.id)
                .values(state="failed", finished_at=utc_now(), error=f"broker unreachable: {error}")
            )
            events.record(session, job.id, "job_state", "failed", detail={"error": str(error)})
        raise ApiProblem(
            503,
            "broker-unavailable",
            "The queue is unreachable",
            "The job could not be queued and was marked failed; try again shortly.",
            headers={"Retry-After": "5"},
        ) from error
    return Accepted(job, created=True)
