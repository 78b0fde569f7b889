"""The pages: jobs list, submit form, job page (progress, verdict, summary, plots, downloads)."""

from __future__ import annotations

from typing import Any

from flask import redirect, render_template, request, url_for
from werkzeug.wrappers import Response

from service.demo import demo_submission
from service.job_queries import JobFilter, cancel_job, get_job, list_jobs
from service.job_resources import job_resource
from service.partial_results import partial_record
from service.plots.job_arrays import quantity_names
from service.predictive import comparison
from service.problem_details import ApiProblem, note_problem
from service.results import request_document
from service.store.models import JOB_STATES, TERMINAL_STATES, Chain, Job
from service.submissions import submit, validate
from service.views.context import runtime
from service.web.advice import grouped_failures
from service.web.blueprint import web
from service.web.plot_views import discrete_names
from service.web.submission_form import (
    METHODS,
    FormState,
    build_body,
    excerpt,
    from_submission,
    place_problems,
    problem_summary,
    read_form,
)

PAGE_SIZE = 25
# Integer-valued quantities listed on the job page: a model with thousands of replicated counts
# would otherwise make the page as long as its summary; the summary JSON holds all of them.
DISCRETE_ROWS = 50
# Small settings for the demo button: the page is for trying the service, and a run this size
# finishes in well under a minute on two cores; the analyst can raise them before submitting.
DEMO_SETTINGS = {"chains": 4, "warmup": 300, "draws": 300}
DOWNLOADS = (
    ("Draws (CSV)", "draws", "csv"),
    ("Draws (JSON)", "draws", "json"),
    ("Draws (Parquet)", "draws", "parquet"),
    ("Sampler statistics (CSV)", "sampler-stats", "csv"),
    ("Sampler statistics (JSON)", "sampler-stats", "json"),
    ("Summary (JSON)", "summary", None),
    ("Diagnostics (JSON)", "diagnostics", None),
    ("Audit record (JSON)", "audit", None),
)


def _job_row(job: Job, chains: list[Chain]) -> dict[str, Any]:
    """The list's row: chains done means succeeded; the others that stopped are counted by how
    (a cancelled job's chains are not "4 of 4 done")."""
    row = job_resource(job, chains)
    row["chains_done"] = sum(1 for c in chains if c.state == "succeeded")
    stopped: dict[str, int] = {}
    for chain in chains:
        if chain.state in TERMINAL_STATES and chain.state != "succeeded":
            stopped[chain.state] = stopped.get(chain.state, 0) + 1
    row["chains_stopped"] = stopped
    return row


@web.get("/")
def home() -> Response:
    return redirect(url_for("web.jobs_page"))


@web.get("/jobs")
def jobs_page() -> str:
    state = request.args.get("state", "")
    label = request.args.get("label", "").strip()
    cursor = request.args.get("cursor") or None
    filter_problems: dict[str, str] = {}
    rows: list[dict[str, Any]] = []
    next_cursor = None
    try:
        where = JobFilter.parse([state] if state else [], [label] if label else [])
        page, next_cursor = list_jobs(runtime(), where, PAGE_SIZE, cursor)
        rows = [_job_row(job, chains) for job, chains in page]
    except ApiProblem as problem:
        if problem.status != 400:
            raise
        for error in problem.errors:
            filter_problems[error.get("parameter", "")] = error.get("message", problem.detail)
    return render_template(
        "jobs.html", rows=rows, states=JOB_STATES, state=state, label=label,
        next_cursor=next_cursor, filter_problems=filter_problems, filtered=bool(state or label),
    )


def _pick(names: list[str], wanted: str | None, fallback: str) -> str:
    return wanted if wanted in names else fallback


@web.get("/jobs/<job_id>")
def job_page(job_id: str) -> str:
    job, chains = get_job(runtime(), job_id)
    document, _ = request_document(runtime(), job_id)
    context: dict[str, Any] = {
        "job": job_resource(job, chains),
        "terminal": job.state in TERMINAL_STATES,
        "submitted": document,
    }
    if job.state == "succeeded":
        names = quantity_names(runtime(), chains)
        summary = job.summary or []
        failed = {f.get("quantity") for f in (job.verdict or {}).get("failed_checks", [])}
        first = names[0] if names else ""
        second = names[1] if len(names) > 1 else first
        context.update(
            summary=summary,
            interval_level=summary[0]["interval"]["level"] if summary else None,
            failed_quantities=failed,
            verdict=job.verdict or {"passed": False, "failed_checks": []},
            groups=grouped_failures(job.verdict),
            names=names,
            quantity=_pick(names, request.args.get("quantity"), first),
            x_name=_pick(names, request.args.get("x"), first),
            y_name=_pick(names, request.args.get("y"), second),
            downloads=DOWNLOADS,
            discrete=discrete_names(summary),
            discrete_rows=[r for r in summary if r.get("discrete")][:DISCRETE_ROWS],
            patterns=(job.diagnostics or {}).get("patterns") or [],
        )
    elif job.state == "timed_out":
        context["partial_downloads"] = partial_downloads(job)
    return render_template("job.html", **context)


def partial_downloads(job: Job) -> list[tuple[str, str, str | None]]:
    """The downloads a timed-out job has: its draws so far, and a summary when one was made."""
    record = partial_record(job) or {}
    if not any(record.get("draws_per_chain") or []):
        return [item for item in DOWNLOADS if item[1] == "audit"]
    summarised = job.summary is not None
    return [i for i in DOWNLOADS if summarised or i[1] not in ("summary", "diagnostics")]


@web.get("/compare")
def compare_page() -> tuple[str, int]:
    """The jobs ticked on the jobs page, ordered by PSIS-LOO, or why they cannot be compared."""
    chosen = request.args.getlist("jobs")
    problems: list[dict[str, str]] = []
    result = None
    status = 200
    if len(chosen) < 2:
        problems.append({"pointer": "/jobs", "message": "tick two or more succeeded jobs on the "
                                                        "same data on the jobs page"})
        status = 422
    else:
        try:
            result = comparison(runtime(), {"jobs": chosen})
        except ApiProblem as problem:
            if problem.status != 422:
                raise
            problems, status = problem.errors, 422
    return render_template("compare.html", result=result, chosen=chosen,
                           problems=problems), status


@web.post("/jobs/<job_id>/cancel")
def cancel_page(job_id: str) -> Response:
    cancel_job(runtime(), job_id)
    return redirect(url_for("web.job_page", job_id=job_id), 303)


def _form_page(state: FormState, status: int = 200) -> tuple[str, int]:
    excerpts = {
        name: excerpt(text, state.problems.get(name, []))
        for name, text in (("model", state.model_text), ("data", state.data_text))
    }
    page = render_template("submit.html", form=state, methods=METHODS, excerpts=excerpts,
                           demo=DEMO_SETTINGS, summary=problem_summary(state))
    return page, status


@web.get("/submit")
def submit_page() -> tuple[str, int]:
    if request.args.get("demo") == "bakery":
        body = demo_submission(
            DEMO_SETTINGS["chains"], DEMO_SETTINGS["warmup"], DEMO_SETTINGS["draws"]
        )
        return _form_page(from_submission(body))
    source = request.args.get("from")
    if source:
        # "Run again with changes": the earlier job's body as sent (else as stored), for the
        # analyst to change; it makes a new job only when submitted.
        document, _ = request_document(runtime(), source)
        return _form_page(from_submission(document["request"] or document["submission"]))
    return _form_page(FormState())


@web.post("/submit")
def submit_form() -> tuple[str, int] | Response:
    state = read_form(request.form, request.files)
    body = build_body(state)
    if body is None:
        note_problem("invalid-submission")
        return _form_page(state, 422)
    if state.problems:
        # The labels could not be read; check the rest too, so every problem shows at once.
        try:
            validate(body, runtime().settings)
        except ApiProblem as problem:
            place_problems(state, body, problem.errors)
        note_problem("invalid-submission")
        return _form_page(state, 422)
    try:
        # The form's token is the idempotency key: submitting the same form twice (a double
        # click, a reload) makes one job.
        accepted = submit(runtime(), body, state.token)
    except ApiProblem as problem:
        note_problem(problem.slug)
        if problem.status == 422:
            place_problems(state, body, problem.errors)
        else:
            state.general.append(problem.detail)
        return _form_page(state, problem.status)
    return redirect(url_for("web.job_page", job_id=accepted.job.id), 303)
