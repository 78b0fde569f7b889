"""Predictive accuracy (PSIS-LOO) of a finished job, and comparisons of jobs on the same data.

Read-only: both work from the pointwise log likelihoods a succeeded job already stores among its
draws' columns, and queue nothing. The engine (worker/comparison) does the statistics; this module
loads the columns chain by chain and shapes the documents.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from service.job_queries import load_job
from service.problem_details import ApiProblem
from service.results import draw_columns, draw_loader, finished_job
from service.runtime import Runtime
from service.store.models import Chain, Job
from worker.approximation import psis
from worker.comparison.loo import LeaveOneOut, psis_loo
from worker.comparison.ranking import compare
from worker.problems import Problem, pointer

# Columns holding one draw's log likelihood of one observation (DEVELOPERS.md, "Compiled model").
POINTWISE_PREFIX = "pointwise."
# Our choice: a table of more than ten fits is not read, and each fit costs a load of its draws.
MAX_COMPARED = 10

LOO_CAUTIONS = (
    "elpd_loo estimates how well the model predicts a new observation like these; it says "
    "nothing about observations unlike them, and a good value does not show the model is right",
    "observations with Pareto k-hat above the threshold make elpd_loo unreliable at them: refit "
    "without them, or use a model more robust to them, before relying on the total",
)


def pointwise_columns(names: list[str]) -> list[int]:
    return [i for i, name in enumerate(names) if name.startswith(POINTWISE_PREFIX)]


def _no_pointwise(job_id: str) -> str:
    return (f"Job {job_id} stores no pointwise log likelihood: list its likelihood terms under "
            "the model's per_draw.pointwise and run it again.")


def not_posterior_draws(job: Job) -> str | None:
    """Why a job's draws are not draws from its posterior (a Laplace job whose check did not call
    the Gaussian trustworthy), or None; PSIS-LOO and bridge sampling both assume they are."""
    method = (job.settings or {}).get("method")
    assessment = (job.verdict or {}).get("assessment")
    if method == "laplace" and assessment != "trustworthy":
        return (f"Job {job.id} is a Laplace approximation assessed {assessment}: its draws are "
                "not posterior draws, so run chains for this")
    return None


def job_loo(runtime: Runtime, job: Job, chains: list[Chain]) -> tuple[LeaveOneOut, list[str]]:
    """PSIS-LOO of a succeeded job; ValueError with a sentence when it has no pointwise values
    or its draws are not posterior draws."""
    unusable = not_posterior_draws(job)
    if unusable is not None:
        raise ValueError(unusable)
    names = draw_columns(runtime, chains)
    columns = pointwise_columns(names)
    if not columns:
        raise ValueError(_no_pointwise(job.id))
    load = draw_loader(runtime, chains)
    # One chain decoded at a time; its pointwise columns are copied out (fancy indexing copies)
    # so that the rest of the chain can be freed before the next is read.
    pieces = [load(chain.chain_index)[:, columns] for chain in chains]
    return psis_loo(pieces), [names[i] for i in columns]


def loo_document(job_id: str, result: LeaveOneOut, names: list[str]) -> dict[str, Any]:
    labels = [psis.reliability(float(k), result.draws) for k in result.k_hat]
    return {
        "job": job_id,
        "elpd_loo": result.elpd_loo,
        "elpd_loo_se": result.elpd_loo_se,
        "p_loo": result.p_loo,
        "p_loo_se": result.p_loo_se,
        "observations": result.observations,
        "draws": result.draws,
        "k_threshold": result.k_threshold,
        "k_counts": result.k_counts(),
        "flagged": [names[i] for i in result.flagged()],
        "pointwise": {
            "names": names,
            "elpd_loo": result.pointwise_elpd.tolist(),
            "p_loo": result.pointwise_p.tolist(),
            "k_hat": [None if not np.isfinite(k) else float(k) for k in result.k_hat],
            "reliability": labels,
            "effective_draws": result.effective_draws.tolist(),
        },
        "cautions": list(LOO_CAUTIONS),
    }


def predictive_accuracy(runtime: Runtime, job_id: str) -> dict[str, Any]:
    job, chains = finished_job(runtime, job_id, "complete")
    try:
        result, names = job_loo(runtime, job, chains)
    except ValueError as error:
        raise ApiProblem(409, "no-predictive-accuracy",
                         "No predictive accuracy for this job", str(error)) from error
    return loo_document(job.id, result, names)


def _comparison_problem(problems: list[Problem]) -> ApiProblem:
    return ApiProblem(422, "invalid-comparison", "The comparison is not valid",
                      f"{len(problems)} problem{'s' if len(problems) != 1 else ''} found; "
                      "nothing was compared.", problems)


def comparable_jobs(runtime: Runtime, body: Any, most: int = MAX_COMPARED,
                    ) -> list[tuple[Job, list[Chain]]]:
    """The succeeded, visible jobs of body["jobs"], all on the same data; ApiProblem 422 with a
    pointer at each offending member otherwise."""
    if not isinstance(body, dict) or not isinstance(body.get("jobs"), list):
        raise _comparison_problem([Problem("/jobs", "give the jobs to compare as a list of job "
                                                    "ids under \"jobs\"")])
    ids = body["jobs"]
    extra = sorted(set(body) - {"jobs"})
    problems = [Problem(pointer(key), f"'{key}' is not a member of a comparison") for key in extra]
    if not 2 <= len(ids) <= most:
        problems.append(Problem("/jobs", f"a comparison takes 2 to {most} jobs; got {len(ids)}"))
    for k, job_id in enumerate(ids):
        if not isinstance(job_id, str) or not job_id:
            problems.append(Problem(pointer("jobs", k), "a job id is a non-empty string"))
        elif job_id in ids[:k]:
            problems.append(Problem(pointer("jobs", k), f"job {job_id} is listed twice"))
    if problems:
        raise _comparison_problem(problems)
    loaded: list[tuple[Job, list[Chain]]] = []
    for k, job_id in enumerate(ids):
        with runtime.sessions() as session:
            try:
                job, chains = load_job(session, job_id)
            except ApiProblem:
                problems.append(Problem(pointer("jobs", k), f"there is no job {job_id}"))
                continue
        if job.state != "succeeded":
            problems.append(Problem(pointer("jobs", k), f"job {job_id} is {job.state}; only "
                                                        "succeeded jobs can be compared"))
            continue
        loaded.append((job, chains))
    if problems:
        raise _comparison_problem(problems)
    first = loaded[0][0]
    for k, (job, _) in enumerate(loaded[1:], start=1):
        if job.data_sha256 != first.data_sha256:
            problems.append(Problem(pointer("jobs", k),
                                    f"job {job.id} was fitted to other data than job {first.id} "
                                    f"(data digests {job.data_sha256[:12]}... and "
                                    f"{first.data_sha256[:12]}...): fits are only comparable on "
                                    "the same data"))
    if problems:
        raise _comparison_problem(problems)
    return loaded


def comparison(runtime: Runtime, body: Any) -> dict[str, Any]:
    """POST /v1/comparisons {"jobs": [id, ...]}: 422 at the offending member for bad input."""
    loaded = comparable_jobs(runtime, body)
    ids = [job.id for job, _ in loaded]
    first = loaded[0][0]
    problems: list[Problem] = []
    fits: dict[str, LeaveOneOut] = {}
    columns: dict[str, list[str]] = {}
    for k, (job, chains) in enumerate(loaded):
        try:
            fits[job.id], columns[job.id] = job_loo(runtime, job, chains)
        except ValueError as error:
            problems.append(Problem(pointer("jobs", k), str(error)))
    if problems:
        raise _comparison_problem(problems)
    reference = columns[first.id]
    for k, (job, _) in enumerate(loaded[1:], start=1):
        if columns[job.id] != reference:
            problems.append(Problem(pointer("jobs", k),
                                    f"job {job.id} stores pointwise log likelihoods of other "
                                    f"observations than job {first.id} ({len(columns[job.id])} "
                                    f"columns against {len(reference)}, or other terms): compare "
                                    "jobs whose models list the same likelihood terms"))
    if problems:
        raise _comparison_problem(problems)
    result = compare(fits)
    return {
        "jobs": ids,
        "data_sha256": first.data_sha256,
        "observations": fits[first.id].observations,
        "ranked": [
            {"job": fit.name, "elpd_loo": fit.elpd_loo, "elpd_loo_se": fit.elpd_loo_se,
             "p_loo": fit.p_loo, "elpd_difference": fit.elpd_difference,
             "difference_se": fit.difference_se,
             "flagged_observations": fit.flagged_observations}
            for fit in result.ranked
        ],
        "cautions": result.cautions,
    }
