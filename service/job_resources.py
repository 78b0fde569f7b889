"""The job resource the API returns: state, each chain's progress, timings, verdict, links."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from service import evaluation_counts
from service.store.models import Chain, Job
from service.timestamps import rfc3339


def chain_resource(chain: Chain) -> dict[str, Any]:
    return {
        "chain": chain.chain_index + 1,
        "state": chain.state,
        "phase": chain.phase,
        "iteration": chain.iteration,
        "iterations_total": chain.iterations_total,
        # Sampling and warm-up apart: warm-up divergences are expected while the step size is
        # being tuned and do not bias the kept draws.
        "divergences": chain.divergences,
        "warmup_divergences": chain.warmup_divergences,
        "evaluations": evaluation_counts.as_document(chain),
        "attempts": chain.attempts,
        "started_at": rfc3339(chain.started_at),
        "finished_at": rfc3339(chain.finished_at),
        "updated_at": rfc3339(chain.updated_at),
        "error": chain.error,
    }


def job_links(job_id: str) -> dict[str, str]:
    base = f"/v1/jobs/{job_id}"
    return {
        "self": base,
        "cancel": base + "/cancel",
        "summary": base + "/summary",
        "draws": base + "/draws",
        "sampler_stats": base + "/sampler-stats",
        "diagnostics": base + "/diagnostics",
        "audit": base + "/audit",
    }


def job_resource(job: Job, chains: Sequence[Chain]) -> dict[str, Any]:
    elapsed = None
    if job.started_at is not None and job.finished_at is not None:
        elapsed = max(0.0, (job.finished_at - job.started_at).total_seconds())
    return {
        "id": job.id,
        "state": job.state,
        "created_at": rfc3339(job.created_at),
        "started_at": rfc3339(job.started_at),
        "finished_at": rfc3339(job.finished_at),
        "elapsed_seconds": elapsed,
        "labels": dict(job.labels),
        "cancel_requested": job.cancel_requested_at is not None,
        # Stopped at the wall-time limit: whatever results exist cover the draws made so far.
        "partial": job.state == "timed_out",
        "chains": [chain_resource(c) for c in sorted(chains, key=lambda c: c.chain_index)],
        "verdict": job.verdict,
        "error": job.error,
        "links": job_links(job.id),
        **provenance(job),
    }


def provenance(job: Job) -> dict[str, Any]:
    """Where a job's model and result came from: the registry, a reused job, a warm start."""
    model_ref = None
    if job.model_name is not None:
        model_ref = {
            "name": job.model_name,
            "version": job.model_version,
            "sha256": job.spec_sha256,
        }
    return {
        "model_ref": model_ref,
        "reused_from": job.reused_from,
        "warm_start_from": job.warm_start_from,
    }
