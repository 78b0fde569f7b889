"""The marginal likelihood of a succeeded job by bridge sampling, and Bayes factors between jobs.

Read-only and computed on request from the stored draws (nothing is queued): the job's model is
compiled again from its stored body, the draws of its unknowns are mapped back to the
unconstrained scale, and worker/approximation/bridge.py does the rest. The proposal's draws come
from a generator seeded by the job's own seed, so the same job always gives the same estimate.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sqlalchemy import select

from service.predictive import comparable_jobs, not_posterior_draws
from service.problem_details import ApiProblem
from service.results import draw_loader, finished_job
from service.runtime import Runtime
from service.store.models import Chain, Job
from worker.approximation.bridge import Evidence, TooFewDraws, bayes_factor, bridge_sampling
from worker.approximation.propriety import improper_prior_problems
from worker.modeling import compile_model

# The stream of the job's seed that bridge sampling uses (the chains use their own spawned
# children of SeedSequence(seed)); any fixed key other than theirs would do.
BRIDGE_STREAM = 17

EVIDENCE_CAUTIONS = (
    "the evidence depends on the priors' full shape, tails included: priors chosen to be vague "
    "change it a great deal without changing the posterior, so compare evidence only between "
    "models whose priors were chosen with care",
    "a Bayes factor compares the models with each other; it does not show that either is right, "
    "and decisions that matter need qualified review",
)


def _body(runtime: Runtime, job_id: str) -> dict[str, Any]:
    with runtime.sessions() as session:
        return session.scalar(select(Job.body).where(Job.id == job_id)) or {}


def job_evidence(runtime: Runtime, job: Job, chains: list[Chain]) -> Evidence:
    unusable = not_posterior_draws(job)
    if unusable is not None:
        raise ApiProblem(422, "not-posterior-draws", "The draws are not posterior draws",
                         unusable + ".", [{"pointer": "/sampler/method", "message": unusable}])
    body = _body(runtime, job.id)
    if any(isinstance(d, dict) and d.get("type") == "integer"
           for d in (body["model"].get("unknowns") or {}).values()):
        # Bridge sampling fits a normal proposal to the continuous unknowns; over integer ones it
        # would need a sum over their values, which it does not do (docs/discrete-unknowns.md).
        message = ("bridge sampling estimates the marginal likelihood of continuous unknowns "
                   "only, and this model has integer unknowns")
        raise ApiProblem(422, "integer-unknowns", "The model has integer unknowns",
                         f"Job {job.id}: {message}; nothing was computed.",
                         [{"pointer": "/model/unknowns", "message": message}])
    problems = improper_prior_problems(body["model"])
    if problems:
        raise ApiProblem(422, "improper-prior", "The prior is not proper",
                         f"Job {job.id}'s prior does not integrate to one, so its marginal "
                         "likelihood is not defined; nothing was computed.", problems)
    model = compile_model(body["model"], body["data"])
    load = draw_loader(runtime, chains)
    width = len(model.unknown_names)
    draws = np.stack([model.unconstrain_draws(load(chain.chain_index)[:, :width])
                      for chain in chains])
    rng = np.random.default_rng(np.random.SeedSequence(job.seed, spawn_key=(BRIDGE_STREAM,)))
    try:
        return bridge_sampling(model, draws, rng)
    except TooFewDraws as error:
        raise ApiProblem(422, "too-few-draws", "Too few draws for bridge sampling",
                         f"Job {job.id}: {error}.") from error


def evidence_record(result: Evidence) -> dict[str, Any]:
    return {"log_evidence": result.log_evidence, "relative_error": result.relative_error,
            "iterations": result.iterations, "warnings": result.warnings}


def evidence_document(runtime: Runtime, job_id: str) -> dict[str, Any]:
    job, chains = finished_job(runtime, job_id, "complete")
    return {"job": job.id, **evidence_record(job_evidence(runtime, job, chains)),
            "cautions": list(EVIDENCE_CAUTIONS)}


def bayes_factor_document(runtime: Runtime, body: Any) -> dict[str, Any]:
    """POST /v1/bayes-factors {"jobs": [first, second]}: log p(y | first) - log p(y | second)."""
    (first, first_chains), (second, second_chains) = comparable_jobs(runtime, body, most=2)
    a = job_evidence(runtime, first, first_chains)
    b = job_evidence(runtime, second, second_chains)
    factor = bayes_factor(a, b)
    return {
        "jobs": [first.id, second.id],
        "log_bayes_factor": factor.log_bayes_factor,
        "error": factor.error,
        "evidence": [{"job": first.id, **evidence_record(a)},
                     {"job": second.id, **evidence_record(b)}],
        "cautions": list(EVIDENCE_CAUTIONS),
    }
