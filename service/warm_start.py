"""Warm starts, the service's side: check the earlier job a submission names, hand its state on.

A submission's ``"warm_start": {"job": id}`` names an earlier job of the same tenant. It must have
succeeded, be of the same model, and have used a method of the new job's family (see
METHOD_FAMILIES).
"Same model" means the same spec hash, or, when both jobs ran registered models, the same model
name with the same ``unknowns`` declarations (a new version may change priors or the likelihood,
the nightly-refit case, but the parameter layout must be the one the adapted state belongs to;
the engine checks the sizes against the new data). The service then puts the earlier job's
per-chain adapted records (the chains table's ``adapted`` column, in chain order) under
``warm_start.chains`` of the stored body, which is all the engine reads.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import select

from service.access.tenancy import visible_jobs
from service.registry import ModelReference
from service.runtime import Runtime
from service.store.models import Chain, Job, ModelVersion
from worker.problems import Problem

POINTER = "/warm_start/job"
# What an earlier chain's adapted state holds depends on the method's family: a step size with
# per-coordinate scales or a full covariance (NUTS, static HMC), or a proposal covariance and
# scale (adaptive Metropolis). The engine (worker/warm_start.py) starts a chain from a record of
# its own family only.
METHOD_FAMILIES = {"nuts": "Hamiltonian", "hmc": "Hamiltonian", "metropolis": "Metropolis"}
WARM_START_METHODS = tuple(METHOD_FAMILIES)
# The warm-up a warm-started job gets when its submission sets none: a quarter of the cold
# default (1000), the length the nightly-refit benchmark measures (tests/bench/RESULTS.md, "Warm
# starts"). The engine runs whatever length the body holds; the service picks the shorter one
# here because a warm start without it would save nothing.
DEFAULT_WARM_WARMUP = 250


@dataclass(frozen=True)
class WarmStart:
    source: str
    chains: list[dict[str, Any]]


def _unknowns_of(session: Any, tenant: str, name: str, version: int | None) -> Any:
    spec = session.scalar(
        select(ModelVersion.spec).where(
            ModelVersion.tenant == tenant,
            ModelVersion.name == name,
            ModelVersion.version == version,
        )
    )
    return (spec or {}).get("unknowns")


def resolve_warm_start(
    runtime: Runtime,
    job_id: str,
    spec: dict[str, Any],
    spec_sha256: str,
    method: Any,
    reference: ModelReference | None,
    tenant: str | None,
) -> WarmStart | list[Problem]:
    """The state to start from, or the problems (all at /warm_start/job) that forbid it."""
    if method not in WARM_START_METHODS:
        return [
            Problem(
                POINTER,
                f"Warm starts are offered for the methods {', '.join(WARM_START_METHODS)}; "
                f"this job's method is {method!r}.",
            )
        ]
    with runtime.sessions() as session:
        # visible_jobs(): another tenant's job is "not found", exactly like an id never used.
        source = session.scalars(
            select(Job).where(Job.id == job_id, *visible_jobs())
        ).one_or_none()
        if source is None:
            return [Problem(POINTER, f"There is no job {job_id!r} to warm-start from.")]
        if source.state != "succeeded":
            return [
                Problem(
                    POINTER,
                    f"Job {job_id} is {source.state}; a warm start needs a job that succeeded.",
                )
            ]
        if source.spec_sha256 != spec_sha256:
            same_name = (
                reference is not None
                and source.model_name == reference.name
                and _unknowns_of(session, tenant or "", source.model_name, source.model_version)
                == spec.get("unknowns")
            )
            if not same_name:
                return [
                    Problem(
                        POINTER,
                        f"Job {job_id} ran another model; a warm start needs the same spec, or "
                        "another version of the same registered model with the same unknowns.",
                    )
                ]
        source_method = (source.settings or {}).get("method")
        if METHOD_FAMILIES.get(source_method) != METHOD_FAMILIES[method]:
            return [
                Problem(
                    POINTER,
                    f"Job {job_id} used the method {source_method!r}, whose adapted state a "
                    f"{method} job cannot start from; warm-start from a job of the "
                    f"{METHOD_FAMILIES[method]} family.",
                )
            ]
        records = session.scalars(
            select(Chain.adapted).where(Chain.job_id == job_id).order_by(Chain.chain_index)
        ).all()
    if not records or any(not isinstance(r, dict) for r in records):
        return [Problem(POINTER, f"Job {job_id} kept no adapted state to start from.")]
    return WarmStart(job_id, [dict(r) for r in records])
