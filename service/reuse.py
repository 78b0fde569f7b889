"""Result reuse: a job that would repeat an earlier succeeded one gets that result at once.

A chain's draws are fixed by the spec, the data, the resolved settings (the seed and the number of
chains among them), the warm-start source and the engine's code; the verdict also by the checks,
and the summary by its interval level.
Their canonical-JSON SHA-256 is the job's ``run_sha256``. A new submission whose fingerprint
matches an earlier succeeded job of the same tenant, and whose submitter gave the seed (a drawn
seed is new each time, so nothing could match), becomes a job of its own that is succeeded from
the start: its chains, stored arrays, summary, diagnostics and verdict are copied inside the
database by INSERT ... SELECT and UPDATE ... SELECT, so the arrays never pass through this process.
Nothing is queued for it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from sqlalchemy import insert, literal, or_, select, update
from sqlalchemy.orm import Session, aliased

from service import events
from service.canonical import CURRENT_SCHEME, SCHEMES, sha256_of_json
from service.store.models import Chain, ChainArray, Job, utc_now
from service.versions import software_versions


def run_fingerprint(
    spec_sha256: str,
    data_sha256: str,
    resolved: dict[str, Any],
    checks: Any,
    warm_start_from: str | None,
    summary_interval: float,
    scheme: str = CURRENT_SCHEME,
    summary_patterns: Sequence[str] = (),
) -> str:
    """SHA-256 of everything that fixes a job's draws, summary and verdict, engine version
    included, under the digest scheme ``scheme`` (the spec and data digests under it too).

    ``summary_patterns`` (the joint-pattern tables asked for) enters only when given, so the
    fingerprints of jobs that ask for none are those made before the setting existed.
    """
    parts: dict[str, Any] = {
        "model": spec_sha256,
        "data": data_sha256,
        "settings": resolved,
        "summary_interval": float(summary_interval),
        "checks": verdict_thresholds(checks),
        "warm_start_from": warm_start_from,
        # An upgrade of drawyard or of the numerical libraries may change the draws; a
        # result made by other code is not reused.
        "software": software_versions(),
    }
    if summary_patterns:
        parts["summary_patterns"] = list(summary_patterns)
    return sha256_of_json(parts, scheme)


def verdict_thresholds(checks: Any) -> dict[str, float | None]:
    """The thresholds the verdict will use, as numbers: checks left out, given at their defaults
    or written 400.0 instead of 400 give the same verdict, so they give the same fingerprint."""
    from worker.diagnostics import resolve_thresholds

    resolved = resolve_thresholds(checks if isinstance(checks, dict) else None)
    return {name: None if value is None else float(value) for name, value in resolved.items()}


def wants_reuse(body: dict[str, Any]) -> bool:
    """Reuse is on unless the body says "reuse": false, and needs a seed the submitter gave."""
    sampler = body.get("sampler")
    given_seed = isinstance(sampler, dict) and sampler.get("seed") is not None
    return body.get("reuse", True) is not False and given_seed


def _same_tenant(tenant: str | None) -> Any:
    return Job.tenant.is_(None) if tenant is None else Job.tenant == tenant


def find_source(
    session: Session, fingerprints: dict[str, str], tenant: str | None
) -> str | None:
    """The newest job that ran (not itself a reuse) and succeeded with one of these fingerprints,
    given by digest scheme: a job stored before RFC 8785 is matched under its own scheme."""
    return session.scalar(
        select(Job.id)
        .where(
            or_(*(
                (Job.run_sha256 == digest) & (Job.digest_scheme == scheme)
                for scheme, digest in fingerprints.items()
            )),
            Job.state == "succeeded",
            Job.reused_from.is_(None),
            _same_tenant(tenant),
        )
        .order_by(Job.seq.desc())
        .limit(1)
    )


def copy_result(session: Session, source_id: str, job_id: str) -> None:
    """Give the (already inserted) job ``job_id`` the chains and results of ``source_id``."""
    now = utc_now()
    source = aliased(Job)

    def from_source(column: Any) -> Any:
        return select(column).where(source.id == source_id).scalar_subquery()

    session.execute(
        update(Job)
        .where(Job.id == job_id)
        .values(
            summary=from_source(source.summary),
            diagnostics=from_source(source.diagnostics),
            verdict=from_source(source.verdict),
            finish_software=from_source(source.finish_software),
        )
        .execution_options(synchronize_session=False)
    )
    # Chains: where and by which software the draws were made, and the evaluations they cost,
    # are kept (the copied sampler report names the same counts); no start or finish time and
    # attempts 0 say that no worker ran them, so the monitoring's chain durations and evaluation
    # rates count only chains that ran.
    copied = (
        "chain_index", "state", "iteration", "iterations_total", "divergences", "phase",
        "warmup_divergences",
        "adapted", "worker_host", "worker_pid", "worker_software",
        "warmup_gradient_evaluations", "sampling_gradient_evaluations",
        "warmup_log_density_evaluations", "sampling_log_density_evaluations",
    )  # fmt: skip
    session.execute(
        insert(Chain).from_select(
            ["job_id", *copied, "attempts", "duplicate_deliveries", "requeues", "updated_at"],
            select(
                literal(job_id),
                *(getattr(Chain, name) for name in copied),
                literal(0), literal(0), literal(0),
                literal(now, Chain.updated_at.type),
            ).where(Chain.job_id == source_id),
        )  # fmt: skip
    )
    old, new = aliased(Chain), aliased(Chain)
    array_columns = (
        "kind", "name", "columns", "column_types", "encoding", "dtype", "shape", "sha256", "data",
    )  # fmt: skip
    session.execute(
        insert(ChainArray).from_select(
            ["chain_id", *array_columns],
            select(new.id, *(getattr(ChainArray, name) for name in array_columns))
            .join(old, ChainArray.chain_id == old.id)
            .join(new, (new.job_id == job_id) & (new.chain_index == old.chain_index))
            .where(old.job_id == source_id),
        )
    )
    events.record(session, job_id, "result_reused", "succeeded", detail={"source": source_id})
    events.record(session, job_id, "job_state", "succeeded", detail={"reused_from": source_id})


def fingerprints_by_scheme(
    model: Any,
    data: Any,
    resolved: dict[str, Any],
    checks: Any,
    warm_start_from: str | None,
    summary_interval: float,
    summary_patterns: Sequence[str] = (),
) -> dict[str, str]:
    """The run fingerprint of a submission under every digest scheme, for find_source."""
    return {
        scheme: run_fingerprint(
            sha256_of_json(model, scheme), sha256_of_json(data, scheme), resolved, checks,
            warm_start_from, summary_interval, scheme, summary_patterns,
        )
        for scheme in SCHEMES
    }
