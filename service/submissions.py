"""Accepting a job: validate everything, then store it and queue its chains, or refuse it whole."""

from __future__ import annotations

import logging
import re
import uuid
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import select, update
from sqlalchemy.exc import IntegrityError

from service import events
from service.access.limits import check_active_jobs, unknown_count_problems
from service.access.tenancy import current_key_id, current_tenant, scoped_idempotency_key
from service.callbacks import notify_problems, queue_callback_safely
from service.canonical import (
    CURRENT_SCHEME,
    NOT_JSON_NUMBER,
    non_finite_pointers,
    sha256_of_json,
)
from service.config import Settings
from service.dispatch import send_chain_tasks
from service.metrics import JOBS_SUBMITTED
from service.problem_details import ApiProblem
from service.registry import ModelReference, reference_problems, resolve_reference
from service.reuse import copy_result, find_source, fingerprints_by_scheme, wants_reuse
from service.runtime import Runtime
from service.schemas import schema_problems
from service.store.engine import transaction
from service.store.models import Chain, Job, JobLabel, utc_now
from service.versions import software_versions
from service.warm_start import DEFAULT_WARM_WARMUP, WarmStart, resolve_warm_start
from worker.problems import Problem, escape_token

log = logging.getLogger(__name__)
JOB_ID = re.compile(r"[0-9a-f]{32}")


@dataclass(frozen=True)
class Accepted:
    job: Job
    created: bool  # False when an Idempotency-Key replay returned an existing job


@dataclass(frozen=True)
class Prepared:
    """A valid submission as it will be stored, with what the service resolved for it."""

    stored: dict[str, Any]  # model filled in from model_ref, warm_start.chains filled, seed set
    resolved: dict[str, Any]  # every sampler setting
    reference: ModelReference | None
    warm_start_from: str | None


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


def model_source_problems(body: dict[str, Any]) -> list[Problem]:
    """Exactly one of ``model`` (a spec) and ``model_ref`` (a registered model)."""
    if "model" in body and "model_ref" in body:
        return [
            Problem(
                "/model_ref",
                "Give either a spec in 'model' or a registered model in 'model_ref', not both.",
            )
        ]
    if "model" not in body and "model_ref" not in body:
        return [
            Problem(
                "/model",
                "The submission needs a model: a spec in 'model', or a registered model in "
                "'model_ref'.",
            )
        ]
    return reference_problems(body["model_ref"]) if "model_ref" in body else []


def validate(
    body: Any, settings: Settings, earlier: Sequence[Problem] | None = None
) -> tuple[dict[str, Any], dict[str, Any]]:
    """The body as stored (seed filled in) and the resolved sampler settings, or ApiProblem.

    Called by ``prepare`` with the service's resolutions already in ``body`` (the registered
    spec beside ``model_ref``, ``warm_start.chains``) and the problems found while resolving
    them in ``earlier``; called alone (the CLI's local check) it checks the members as sent.
    """
    from worker import runner

    problems = schema_problems("submission", body)
    if isinstance(body, dict) and (too_big := unknown_count_problems(body, settings)):
        raise invalid(too_big)
    if isinstance(body, dict):
        # The engine checks the model against its schema and then semantically, reporting every
        # problem; ours would stop at the first layer, so the model part is left to it.
        # warm_start.chains is filled in by the service (service/warm_start.py), not sent.
        problems = [
            p
            for p in problems
            if not _under(p.pointer, "/model") and not _under(p.pointer, "/warm_start/chains")
        ]
        first = model_source_problems(body) if earlier is None else list(earlier)
        problems = _merged(first, problems)
        engine_found = runner.check_submission(body, settings.max_chains, settings.max_draws)
        if earlier is not None:
            engine_found = [_about_the_earlier_job(p) for p in engine_found]
        if "model_ref" in body and "model" not in body:
            # An unresolved reference is already reported at /model_ref.
            engine_found = [p for p in engine_found if p.pointer != "/model"]
        problems = _merged(problems, engine_found)
        problems = _merged(problems, notify_problems(body, settings))
        problems = _merged(problems, _label_problems(body.get("labels")))
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


# The schema's pattern for label keys (schemas/common.json) as a whole-string match: JSON
# Schema patterns are searched, and "$" also matches before a final newline, so "team\n" passes
# the schema and would be stored as an invisible twin of "team".
LABEL_KEY = re.compile(r"[A-Za-z0-9_.\-/]{1,255}")
SCHEMA_LABEL_KEY = re.compile(r"^[A-Za-z0-9_.\-/]{1,255}$")  # what the schema lets through


def _label_problems(labels: Any) -> list[Problem]:
    # Labels are stored as text columns; PostgreSQL refuses a NUL character in text.
    if not isinstance(labels, dict):
        return []
    problems = [
        Problem(
            f"/labels/{escape_token(key)}",
            "A label key is 1 to 255 letters, digits and '_', '.', '-', '/', nothing else.",
        )
        for key in labels
        # Other bad keys are the schema's to report, at /labels.
        if SCHEMA_LABEL_KEY.search(key) and not LABEL_KEY.fullmatch(key)
    ]
    problems += [
        Problem(f"/labels/{escape_token(key)}", "A label value cannot hold a NUL character.")
        for key, value in labels.items()
        if isinstance(value, str) and "\x00" in value
    ]
    return problems


def _about_the_earlier_job(problem: Problem) -> Problem:
    """An engine problem with the filled-in warm_start.chains, said of the job the body named.

    The submitter sent only ``warm_start.job``; a pointer into records they never saw would not
    tell them what to change.
    """
    if not _under(problem.pointer, "/warm_start/chains"):
        return problem
    parts = problem.pointer.split("/")
    chain = f"chain {int(parts[3]) + 1}" if len(parts) > 3 and parts[3].isdigit() else "chains"
    return Problem("/warm_start/job", f"The earlier job's {chain}: {problem.message}")


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


def existing_for_key(runtime: Runtime, key: str, body: Any) -> Job | None:
    """The job an Idempotency-Key already made, or None; 409 when the body differs (compared
    under the job's own digest scheme, so a retry across the upgrade to RFC 8785 still matches)."""
    with runtime.sessions() as session:
        job = session.scalars(select(Job).where(Job.idempotency_key == key)).one_or_none()
    if job is None:
        return None
    if job.request_sha256 != sha256_of_json(body, job.digest_scheme):
        raise ApiProblem(
            409,
            "idempotency-key-reused",
            "Idempotency-Key already used for a different request",
            f"The key was used for job {job.id} with a different body; use a new key for a new "
            "job.",
        )
    return job


def _warm_start_member_problems(member: Any) -> list[Problem]:
    # The schema would say the same, but these members must be right before the store is asked.
    if not isinstance(member, dict):
        return [Problem("/warm_start", "The warm start is an object naming an earlier job.")]
    problems = [
        Problem(f"/warm_start/{escape_token(key)}", f"Unknown member '{key}' of the warm start.")
        for key in member
        if key != "job"
    ]
    if not isinstance(member.get("job"), str) or JOB_ID.fullmatch(member["job"]) is None:
        problems.append(Problem("/warm_start/job", "The job is an id of 32 lower-case hex digits."))
    return problems


def prepare(runtime: Runtime, body: Any) -> Prepared:
    """Resolve ``model_ref`` and ``warm_start`` against the store, then validate the whole."""
    if not isinstance(body, dict):
        stored, resolved = validate(body, runtime.settings)
        return Prepared(stored, resolved, None, None)
    problems = model_source_problems(body)
    engine_body = dict(body)
    reference = None
    if not problems and "model_ref" in body:
        found = resolve_reference(runtime, body["model_ref"])
        if isinstance(found, Problem):
            problems.append(found)
        else:
            spec, reference = found
            engine_body["model"] = spec
            # The version actually used is recorded, also when the submission left it out.
            engine_body["model_ref"] = {"name": reference.name, "version": reference.version}
    warm: WarmStart | None = None
    if "warm_start" in body:
        member_problems = _warm_start_member_problems(body["warm_start"])
        problems.extend(member_problems)
        if isinstance(body["warm_start"], dict):
            # The engine's records come from the service only; records sent are refused above
            # as an unknown member, not checked as if they were the earlier job's.
            engine_body["warm_start"] = {
                key: value for key, value in body["warm_start"].items() if key != "chains"
            }
        model = engine_body.get("model")
        if not member_problems and isinstance(model, dict):
            given = body.get("sampler", {})
            sampler = given if isinstance(given, dict) else {}
            method = sampler.get("method", _default_method())
            outcome = resolve_warm_start(
                runtime, body["warm_start"]["job"], model, _model_hash(model), method,
                reference, current_tenant(),
            )  # fmt: skip
            if isinstance(outcome, WarmStart):
                warm = outcome
                engine_body["warm_start"] = {"job": warm.source, "chains": warm.chains}
                # Settings that are not an object are left as sent, for validation to refuse.
                if isinstance(given, dict) and "warmup_iterations" not in given:
                    # The shorter warm-up is the point of a warm start; it is recorded like
                    # any setting (and is part of the reuse fingerprint).
                    engine_body["sampler"] = {**sampler, "warmup_iterations": DEFAULT_WARM_WARMUP}
            else:
                problems.extend(outcome)
    stored, resolved = validate(engine_body, runtime.settings, problems)
    return Prepared(stored, resolved, reference, warm.source if warm else None)


def _default_method() -> str:
    from worker.samplers.settings import SamplerSettings

    return SamplerSettings().method


def _model_hash(model: Any) -> str:
    try:
        return sha256_of_json(model)
    except ValueError:
        return ""  # NaN in the spec: validation refuses it with a pointer


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
            [
                {"pointer": where, "message": NOT_JSON_NUMBER}
                for where in non_finite_pointers(body) or [""]
            ],
        ) from error
    idempotency_key = scoped_idempotency_key(idempotency_key)
    if idempotency_key is not None:
        job = existing_for_key(runtime, idempotency_key, body)
        if job is not None:
            return Accepted(job, created=False)
    prepared = prepare(runtime, body)
    stored, resolved = prepared.stored, prepared.resolved
    tenant = current_tenant()
    spec_sha256 = sha256_of_json(stored["model"])
    data_sha256 = sha256_of_json(stored.get("data") or {})
    from worker.runner import summary_interval

    fingerprints = fingerprints_by_scheme(
        stored["model"], stored.get("data") or {}, resolved, stored.get("checks"),
        prepared.warm_start_from, summary_interval(stored),
        (stored.get("summary") or {}).get("patterns") or (),
    )
    run_sha256 = fingerprints[CURRENT_SCHEME]
    source = None
    if wants_reuse(body):
        with runtime.sessions() as session:
            source = find_source(session, fingerprints, tenant)
    if source is None:
        # A reused result occupies no worker, so only jobs that will run count against the cap.
        check_active_jobs(runtime, tenant)
    chains = int(resolved["chains"])
    iterations_total = int(resolved.get("warmup_iterations", 0)) + int(resolved.get("draws", 0))
    now = utc_now()
    reference = prepared.reference
    job = Job(
        id=uuid.uuid4().hex,
        state="queued" if source is None else "succeeded",
        created_at=now,
        chain_count=chains,
        seed=int(stored["sampler"]["seed"]),
        body=stored,
        settings=resolved,
        labels=dict(body.get("labels") or {}),
        request_body=body,
        request_sha256=request_sha256,
        spec_sha256=spec_sha256,
        data_sha256=data_sha256,
        digest_scheme=CURRENT_SCHEME,
        idempotency_key=idempotency_key,
        submitted_by=current_key_id(),
        tenant=tenant,
        api_software=software_versions(),
        model_name=reference.name if reference else None,
        model_version=reference.version if reference else None,
        run_sha256=run_sha256,
        reused_from=source,
        warm_start_from=prepared.warm_start_from,
    )
    if source is not None:
        job.started_at = job.finished_at = job.finish_enqueued_at = now
    try:
        with transaction(runtime.sessions) as session:
            session.add(job)
            session.flush()
            session.add_all(JobLabel(job_id=job.id, key=k, value=v) for k, v in job.labels.items())
            if source is not None:
                copy_result(session, source, job.id)
            else:
                session.add_all(
                    Chain(
                        job_id=job.id,
                        chain_index=index,
                        state="queued",
                        attempts=0,
                        duplicate_deliveries=0,
                        iteration=0,
                        divergences=0,
                        warmup_divergences=0,
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
        existing = existing_for_key(runtime, idempotency_key, body)
        if existing is None:
            raise
        return Accepted(existing, created=False)
    if source is not None:
        # Final from the start: a completion callback, if asked for, goes out now.
        queue_callback_safely(runtime, job.id)
        JOBS_SUBMITTED.inc()
        return Accepted(job, created=True)
    try:
        send_chain_tasks(runtime.celery, runtime.settings.queue, job.id, chains)
    except Exception as error:
        _not_queued(runtime, job.id, error)
        raise ApiProblem(
            503,
            "broker-unavailable",
            "The queue is unreachable",
            "The job could not be queued and was marked failed; send it again shortly (with the "
            "same Idempotency-Key, if any: it was not kept).",
            headers={"Retry-After": "5"},
        ) from error
    JOBS_SUBMITTED.inc()
    return Accepted(job, created=True)


NOT_QUEUED = "The queue was unreachable when the job was submitted; it never ran."


def _not_queued(runtime: Runtime, job_id: str, error: Exception) -> None:
    """Mark a job the broker refused as failed, and free its idempotency key.

    The key is freed so that a retry after the 503 makes a job that runs, instead of being
    answered with this failed one. The broker's own message (which names its host and port) goes
    to the service log only; the job's error and event say what happened in words of our own.
    """
    log.error("job %s could not be queued: %s: %s", job_id, type(error).__name__, error)
    with transaction(runtime.sessions) as session:
        session.execute(
            update(Job)
            .where(Job.id == job_id)
            .values(state="failed", finished_at=utc_now(), error=NOT_QUEUED, idempotency_key=None)
        )
        # Its chains were never sent: ended here, so the sweeper does not send them later.
        session.execute(
            update(Chain)
            .where(Chain.job_id == job_id, Chain.state == "queued")
            .values(state="failed", error=NOT_QUEUED, updated_at=utc_now())
        )
        events.record(session, job_id, "job_state", "failed", detail={"error": "queue unreachable"})
