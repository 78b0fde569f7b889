"""The job subcommands of `drawyard`: submit, watch, fetch, cancel, list and check.

They talk to a service through service.client, except `check`, which runs the service's own
validation in this process so a pipeline's CI can refuse a bad spec before it reaches a server.
Exit codes are part of the interface (see EXIT_CODES_HELP) so shell steps can branch on them.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import textwrap
from collections.abc import Callable
from pathlib import Path
from typing import Any

from service.client.data_files import DataFileError, read_data_files
from service.client.errors import ProblemError, ServiceUnreachable
from service.client.http import DEFAULT_URL, DrawyardClient
from service.client.records import Job
from service.client.retrying import RetryPolicy
from service.client.waiting import WaitTimedOut, wait_for_job
from service.discrete_tables import discrete_text

EXIT_PASSED = 0
EXIT_CHECKS_FAILED = 3
EXIT_JOB_FAILED = 4
EXIT_BAD_INPUT = 5
EXIT_UNREACHABLE = 6
EXIT_STILL_RUNNING = 7
EXIT_TIMED_OUT = 8
# 128 + SIGINT, what shells report for a command stopped by Ctrl-C.
EXIT_INTERRUPTED = 130

EXIT_CODES_HELP = f"""\
exit codes:
  {EXIT_PASSED}  success (for a finished job: it succeeded and passed its quality checks)
  2  the command line itself is wrong (usage error)
  {EXIT_CHECKS_FAILED}  the job succeeded but failed one or more quality checks (the verdict)
  {EXIT_JOB_FAILED}  the job failed or was cancelled
  {EXIT_BAD_INPUT}  bad input: the service refused the request (a 4xx problem), a local check
     found problems, or a spec, data or settings file could not be read
  {EXIT_UNREACHABLE}  the service could not be reached, timed out, or answered with a server error
  {EXIT_STILL_RUNNING}  --timeout ran out while the job was still queued or running
  {EXIT_TIMED_OUT}  the job stopped at its wall-time limit (state timed_out): its draws so far
     can be fetched but are partial, and its verdict fails
  {EXIT_INTERRUPTED}  interrupted (Ctrl-C): the command stopped; a submitted job runs on

The service URL comes from --url, else the DRAWYARD_URL environment variable, else
{DEFAULT_URL}; an API key from --api-key, else DRAWYARD_API_KEY."""

FETCHABLE = ("summary", "draws", "sampler-stats", "diagnostics", "audit")
STATES = ("queued", "running", "succeeded", "failed", "cancelled", "timed_out")
VERDICTS = ("passed", "failed", "none")
# Our choice: often enough that a log shows a long job alive, seldom enough that a night's job
# writes about a hundred lines an hour.
HEARTBEAT_SECONDS = 30.0


class InputProblem(Exception):
    """A file or option the command cannot use; reported and mapped to EXIT_BAD_INPUT."""


# ---- building a submission from files and options ---------------------------------------------


def _read_json(path: Path, what: str) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8-sig"))
    except OSError as error:
        raise InputProblem(f"{what} {path}: cannot be read: {error.strerror or error}") from error
    except (ValueError, UnicodeDecodeError) as error:
        raise InputProblem(f"{what} {path}: not JSON: {error}") from error


def _pair(text: str, separator: str, what: str) -> tuple[str, str]:
    name, found, value = text.partition(separator)
    if not found or not name:
        raise InputProblem(f"{what} '{text}': expected NAME{separator}VALUE")
    return name, value


def _json_value(text: str) -> Any:
    # `--check min_bulk_ess=1000` and `--check max_divergences=null` are JSON; anything that is
    # not (a bare word) is kept as the string it is, which validation then judges.
    try:
        return json.loads(text)
    except ValueError:
        return text


def _member(body: dict[str, Any], name: str, source: Path | None) -> dict[str, Any]:
    value = body.get(name)
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise InputProblem(f"settings file {source}: '{name}' must be a JSON object")
    return dict(value)


def parse_model_ref(text: str) -> dict[str, Any]:
    """``NAME`` (the latest version) or ``NAME:VERSION``, as the submission's model_ref."""
    name, _, version = text.partition(":")
    if not name:
        raise InputProblem(f"--model '{text}': expected NAME or NAME:VERSION")
    if not version:
        return {"name": name}
    # ASCII digits only: str.isdigit() also accepts "²", which int() refuses with a traceback.
    if not (version.isascii() and version.isdigit()):
        raise InputProblem(f"--model '{text}': the version after ':' is a whole number")
    return {"name": name, "version": int(version)}


def build_submission(args: argparse.Namespace) -> dict[str, Any]:
    """The body of POST /v1/jobs from the spec file, data files, settings file and options.

    Precedence, lowest first: the settings file, then the sampler options, then --set, --check
    and --label one by one.
    """
    body: dict[str, Any] = {}
    if args.settings is not None:
        settings = _read_json(args.settings, "settings file")
        if not isinstance(settings, dict):
            raise InputProblem(
                f"settings file {args.settings}: expected a JSON object with members such as "
                "'sampler', 'checks' and 'labels'"
            )
        body.update(settings)
    data_paths = [*args.data, *args.data_files]
    if getattr(args, "model", None):
        # With a registered model the first positional file is data, not a spec.
        body["model_ref"] = parse_model_ref(args.model)
        data_paths.insert(0, args.spec)
    else:
        body["model"] = _read_json(args.spec, "spec file")
    if getattr(args, "no_reuse", False):
        body["reuse"] = False
    if getattr(args, "warm_start", None):
        body["warm_start"] = {"job": args.warm_start}
    try:
        body["data"] = read_data_files(data_paths)
    except DataFileError as error:
        raise InputProblem(str(error)) from error
    sampler = _member(body, "sampler", args.settings)
    chosen = {
        "method": args.method,
        "chains": args.chains,
        "warmup_iterations": args.warmup,
        "draws": args.draws,
        "seed": args.seed,
        "target_acceptance": args.target_acceptance,
        "maximum_tree_depth": args.maximum_tree_depth,
        "preconditioning": args.preconditioning,
    }
    sampler.update({name: value for name, value in chosen.items() if value is not None})
    for item in args.set:
        name, value = _pair(item, "=", "--set")
        sampler[name] = _json_value(value)
    checks = _member(body, "checks", args.settings)
    for item in args.check:
        name, value = _pair(item, "=", "--check")
        checks[name] = _json_value(value)
    summary = _member(body, "summary", args.settings)
    if args.interval_level is not None:
        summary["interval"] = args.interval_level
    if args.pattern:
        summary["patterns"] = [*summary.get("patterns", []), *args.pattern]
    labels = _member(body, "labels", args.settings)
    for item in args.label:
        key, value = _pair(item, "=", "--label")
        labels[key] = value
    members = (("sampler", sampler), ("summary", summary), ("checks", checks), ("labels", labels))
    for name, member in members:
        if member or name in body:
            body[name] = member
    return body


# ---- reporting --------------------------------------------------------------------------------


def _say(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


def _report_problem(command: str, error: ProblemError) -> int:
    _say(f"drawyard {command}: {error}")
    for item in error.errors:
        _say(f"  {item['pointer'] or '(the whole submission)'}: {item['message']}")
    return EXIT_BAD_INPUT if error.is_client_error else EXIT_UNREACHABLE


def job_exit_code(job: Job) -> int:
    """What a finished job means for a pipeline: passed, failed its checks, or did not finish."""
    if job.state == "succeeded":
        if job.verdict is not None and not job.verdict.passed:
            return EXIT_CHECKS_FAILED
        return EXIT_PASSED
    if job.state == "timed_out":
        # Not a success, and not a plain failure either: a pipeline may still want the draws.
        return EXIT_TIMED_OUT
    return EXIT_JOB_FAILED


def _warn_partial(job_id: str) -> None:
    _say(
        f"drawyard: warning: job {job_id} stopped at its wall-time limit; these results are "
        "partial (the draws made so far), so its diagnostics describe an incomplete run"
    )


def _report_final(job: Job, as_json: bool) -> int:
    if as_json:
        print(json.dumps(job.raw, indent=2))
    if job.state == "succeeded":
        if job.verdict is not None and not job.verdict.passed:
            _say(f"job {job.id} succeeded but failed {len(job.verdict.failed_checks)} check(s):")
            for check in job.verdict.failed_checks:
                _say(f"  {check.check}: {check.message}")
        else:
            _say(f"job {job.id} succeeded and passed its quality checks")
    elif job.state == "timed_out":
        _say(f"job {job.id} timed out: {job.error or 'it stopped at its wall-time limit'}")
        _say(f"  the draws made so far can be fetched (partial): drawyard fetch {job.id} draws")
    else:
        reason = f": {job.error}" if job.error else ""
        _say(f"job {job.id} {job.state}{reason}")
    return job_exit_code(job)


def _client(args: argparse.Namespace) -> DrawyardClient:
    # The connection options may stand before the subcommand or after it (add_connection_group
    # leaves unset ones out of the namespace), so the defaults are applied here.
    given = {**CONNECTION_DEFAULTS}
    given.update((k, v) for k, v in vars(args).items() if k in CONNECTION_DEFAULTS)
    return DrawyardClient(
        given["url"] or os.environ.get("DRAWYARD_URL") or DEFAULT_URL,
        connect_timeout=given["connect_timeout"],
        read_timeout=given["read_timeout"],
        retry=RetryPolicy(retries=given["retries"]),
        api_key=given["api_key"] or os.environ.get("DRAWYARD_API_KEY"),
    )


def _guarded(command: str, action: Callable[[argparse.Namespace], int]) -> Callable:
    """Map what can go wrong to the documented exit codes, with a one-line reason on stderr."""

    def run(args: argparse.Namespace) -> int:
        try:
            return action(args)
        except InputProblem as error:
            _say(f"drawyard {command}: {error}")
            return EXIT_BAD_INPUT
        except ProblemError as error:
            return _report_problem(command, error)
        except ServiceUnreachable as error:
            _say(f"drawyard {command}: service unreachable: {error}")
            return EXIT_UNREACHABLE
        except WaitTimedOut as error:
            _say(f"drawyard {command}: {error}")
            return EXIT_STILL_RUNNING
        except KeyboardInterrupt:
            # Stopping the command does not stop the job: say so instead of a traceback.
            _say(
                f"\ndrawyard {command}: interrupted; a job already submitted keeps running on the"
                " service (drawyard cancel JOB_ID stops it)"
            )
            return EXIT_INTERRUPTED

    return run


def _wait(client: DrawyardClient, job_id: str, args: argparse.Namespace) -> Job:
    progress = False if args.no_progress else None
    return wait_for_job(
        client, job_id, interval=args.interval, timeout=args.timeout, progress=progress,
        heartbeat=args.heartbeat, heartbeat_stream=sys.stderr,
    )


# ---- the commands -----------------------------------------------------------------------------


def run_submit(args: argparse.Namespace) -> int:
    body = build_submission(args)
    with _client(args) as client:
        job = client.submit(body, idempotency_key=args.idempotency_key)
        # The id goes out first and alone on stdout, so `JOB=$(drawyard submit ...)` works and a
        # pipeline that is interrupted while waiting still knows which job it started.
        print(job.id, flush=True)
        if not args.wait:
            return EXIT_PASSED
        return _report_final(_wait(client, job.id, args), args.json)


def run_watch(args: argparse.Namespace) -> int:
    with _client(args) as client:
        return _report_final(_wait(client, args.job, args), args.json)


def run_fetch(args: argparse.Namespace) -> int:
    what = args.what
    if (args.format != "json" or args.layout) and what not in ("draws", "sampler-stats"):
        raise InputProblem(
            f"--format and --layout are offered for draws and sampler-stats, not {what}"
        )
    if args.output is None and args.format in ("parquet", "npz"):
        raise InputProblem(f"--format {args.format} is binary: give a file with -o")
    if args.if_changed and (args.output is None or what not in ("draws", "sampler-stats")):
        raise InputProblem("--if-changed needs draws or sampler-stats written to a file with -o")
    with _client(args) as client:
        if what in ("draws", "sampler-stats"):
            columns = _names(args.quantities)
            chains = _chains(args.chains)
            # CSV and .npz carry no metadata, so the job record says whether the draws are partial.
            if client.job(args.job).partial:
                _warn_partial(args.job)
            if args.output is None:
                return _download(client, args, sys.stdout.buffer, columns, chains)
            if args.if_changed:
                return _download_if_changed(client, args, columns, chains)
            try:
                with _output_file(args.output) as out:
                    return _download(client, args, out, columns, chains)
            except (ProblemError, ServiceUnreachable):
                # No half-written file left behind for a later step to mistake for the result.
                args.output.unlink(missing_ok=True)
                raise
        document = {
            "summary": client.summary,
            "diagnostics": client.diagnostics,
            "audit": client.audit,
        }[what](args.job)
        if document.get("partial"):
            _warn_partial(args.job)
        text = json.dumps(document, indent=2) + "\n"
        if args.output is None:
            sys.stdout.write(text)
        else:
            with _output_file(args.output) as out:
                out.write(text.encode())
    return EXIT_PASSED


def _output_file(path: Path):
    try:
        return path.open("wb")
    except OSError as error:
        raise InputProblem(f"output {path}: cannot be written: {error.strerror}") from error


def _download(client, args, out, columns, chains) -> int:
    client.download(
        args.job, args.what, out, args.format, columns, chains, args.thin, args.layout
    )
    out.flush()
    return EXIT_PASSED


def _download_if_changed(client, args, columns, chains) -> int:
    """Download only when the result differs from the copy in the file, as told by the entity tag
    kept beside it in FILE.etag (written after each complete download)."""
    tag_file = args.output.with_name(args.output.name + ".etag")
    known = tag_file.read_text().strip() if tag_file.exists() and args.output.exists() else None
    outcome = client.download_if_changed(
        args.job, args.what, args.output, known or None, args.format, columns, chains, args.thin,
        args.layout,
    )
    if outcome.etag:
        tag_file.write_text(outcome.etag + "\n")
    else:
        tag_file.unlink(missing_ok=True)
    if not outcome.changed:
        _say(f"drawyard fetch: {args.output} is up to date (the service sent nothing)")
    return EXIT_PASSED


def _names(text: str | None) -> list[str] | None:
    return [n.strip() for n in text.split(",") if n.strip()] if text else None


def _chains(text: str | None) -> list[int] | None:
    if not text:
        return None
    try:
        return [int(c) for c in text.split(",") if c.strip()]
    except ValueError as error:
        raise InputProblem(f"--chains '{text}': expected chain numbers such as 1,2") from error


def run_probabilities(args: argparse.Namespace) -> int:
    with _client(args) as client:
        document = client.summary(args.job)
    if document.get("partial"):
        _warn_partial(args.job)
    sys.stdout.write(discrete_text(dict(document)))
    return EXIT_PASSED


def run_cancel(args: argparse.Namespace) -> int:
    with _client(args) as client:
        job = client.cancel(args.job)
        if args.wait:
            job = _wait(client, job.id, args)
        print(f"{job.id} {job.state}")
    return EXIT_PASSED


def run_list(args: argparse.Namespace) -> int:
    states = [s for item in args.state for s in item.split(",") if s]
    verdicts = [v for item in args.verdict for v in item.split(",") if v]
    with _client(args) as client:
        if args.all:
            jobs = list(client.iter_jobs(states, args.label, args.limit, verdicts))
            cursor = None
        else:
            page = client.list_jobs(states, args.label, args.limit, verdicts=verdicts)
            jobs, cursor = page.jobs, page.next_cursor
    if args.json:
        print(json.dumps({"jobs": [j.raw for j in jobs], "next_cursor": cursor}, indent=2))
        return EXIT_PASSED
    if not args.no_header:
        print(f"{'JOB':<32}  {'STATE':<9}  {'CREATED':<24}  {'VERDICT':<7}  LABELS")
    for job in jobs:
        verdict = "-" if job.verdict is None else ("passed" if job.verdict.passed else "failed")
        labels = ",".join(f"{k}:{v}" for k, v in sorted(job.labels.items())) or "-"
        print(f"{job.id}  {job.state:<9}  {job.created_at or '-':<24}  {verdict:<7}  {labels}")
    if cursor:
        _say("more jobs match; --all lists every page")
    return EXIT_PASSED


def run_check(args: argparse.Namespace) -> int:
    # The service's own validation (schemas, then worker.runner.check_submission, then the
    # service's limits), so the pointers and messages are exactly those of its 422 answer.
    from service.config import load_settings
    from service.problem_details import ApiProblem
    from service.submissions import validate

    if args.model:
        raise InputProblem(
            "check needs the spec itself; write a registered version to a file first: "
            "drawyard models show NAME VERSION > spec.json"
        )
    body = build_submission(args)
    overrides = {
        name: value
        for name, value in (("max_chains", args.max_chains), ("max_draws", args.max_draws))
        if value is not None
    }
    settings = load_settings(overrides)
    try:
        validate(body, settings)
    except ApiProblem as problem:
        document = problem.document()
        if args.json:
            print(json.dumps(document, indent=2))
        else:
            for item in problem.errors:
                print(f"{item['pointer'] or '(the whole submission)'}: {item['message']}")
        _say(f"drawyard check: {problem.detail}")
        return EXIT_BAD_INPUT
    if args.json:
        print(json.dumps({"valid": True, "errors": []}))
    _say("drawyard check: no problems found")
    return EXIT_PASSED


# ---- the parser -------------------------------------------------------------------------------


CONNECTION_DEFAULTS: dict[str, Any] = {
    "url": None, "api_key": None, "connect_timeout": 5.0, "read_timeout": 30.0, "retries": 5,
}


def add_connection_group(parser: argparse.ArgumentParser) -> None:
    """The service options, on the top-level parser and on each subcommand's. Unset ones stay out
    of the namespace (argparse.SUPPRESS), so a subcommand's parser, which fills in its defaults
    after the top-level one has parsed, never hides a value given before the subcommand."""
    group = parser.add_argument_group("service")
    hidden = argparse.SUPPRESS
    group.add_argument("--url", default=hidden,
                       help=f"service base URL (default: $DRAWYARD_URL, else {DEFAULT_URL})")
    group.add_argument("--api-key", default=hidden, metavar="KEY",
                       help="API key, sent as 'Authorization: Bearer KEY' (default: "
                            "$DRAWYARD_API_KEY; prefer the variable, since arguments are visible "
                            "to other users of the machine)")
    group.add_argument("--connect-timeout", type=float, default=hidden, metavar="SECONDS",
                       help="give up connecting after this long (default: 5)")
    group.add_argument("--read-timeout", type=float, default=hidden, metavar="SECONDS",
                       help="give up waiting for an answer after this long (default: 30)")
    group.add_argument("--retries", type=int, default=hidden, metavar="N",
                       help="repeats after 429/503 answers or failed connections, waiting as "
                            "Retry-After says or with jittered exponential backoff (default: 5)")


def _connection_options() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    add_connection_group(common)
    return common


def _waiting_options() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    group = common.add_argument_group("waiting")
    group.add_argument("--interval", type=float, default=1.0, metavar="SECONDS",
                       help="seconds between status polls (default: 1)")
    group.add_argument("--timeout", type=float, default=None, metavar="SECONDS",
                       help=f"stop waiting after this long, exit {EXIT_STILL_RUNNING} "
                            "(default: wait until the job ends)")
    group.add_argument("--no-progress", action="store_true",
                       help="no progress bar even on a terminal (none is drawn when stdout is "
                            "not a terminal)")
    group.add_argument("--heartbeat", type=float, default=HEARTBEAT_SECONDS, metavar="SECONDS",
                       help="when stdout is not a terminal, a time-stamped progress line on "
                            f"stderr every this many seconds, and one at the end (default: "
                            f"{HEARTBEAT_SECONDS:g}; 0 for none)")
    group.add_argument("--json", action="store_true",
                       help="print the finished job's JSON resource on stdout")
    return common


def _submission_options() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("spec", type=Path,
                        help="the model spec, a JSON file (with --model: the first data file)")
    common.add_argument("data", type=Path, nargs="*",
                        help="data files: JSON objects of input names to values, or CSV files "
                             "whose header names the inputs and whose columns are their vectors "
                             "(integer columns stay integers); several are merged")
    common.add_argument("--data", dest="data_files", type=Path, action="append", default=[],
                        metavar="FILE", help="another data file (may be repeated)")
    registry = common.add_argument_group("registered models, reuse and warm starts")
    registry.add_argument("--model", default=None, metavar="NAME[:VERSION]",
                          help="run a registered model (see `drawyard models`) instead of a spec "
                               "file; without :VERSION the latest, which the job records")
    registry.add_argument("--no-reuse", action="store_true",
                          help="always run, even when an earlier job with the same model, data, "
                               "settings and seed succeeded (default: return that result at once)")
    registry.add_argument("--warm-start", default=None, metavar="JOB",
                          help="start from this earlier succeeded job of the same model: its "
                               "adapted step size, preconditioning and final positions")
    group = common.add_argument_group("sampler and checks")
    group.add_argument("--settings", type=Path, default=None, metavar="FILE",
                       help="a JSON file with any of the submission members 'sampler', "
                            "'summary', 'checks' and 'labels'; the options below override it")
    group.add_argument("--method", choices=("nuts", "hmc", "metropolis", "laplace", "grid"),
                       default=None,
                       help="a sampler, or an approximation run as one task: laplace (a "
                            "Gaussian at the mode, checked by PSIS) or grid (exact, for one or "
                            "two unconstrained coordinates)")
    group.add_argument("--chains", type=int, default=None, metavar="N")
    group.add_argument("--warmup", type=int, default=None, metavar="N",
                       help="warm-up iterations per chain")
    group.add_argument("--draws", type=int, default=None, metavar="N",
                       help="kept draws per chain")
    group.add_argument("--seed", type=int, default=None, metavar="N",
                       help="seed of the whole job (default: drawn by the service and recorded)")
    group.add_argument("--target-acceptance", type=float, default=None, metavar="P")
    group.add_argument("--maximum-tree-depth", type=int, default=None, metavar="N")
    group.add_argument("--preconditioning", choices=("none", "per_coordinate", "full"),
                       default=None)
    group.add_argument("--interval-level", type=float, default=None, metavar="LEVEL",
                       help="the level of each quantity's central interval in the summary "
                            "(default 0.8)")
    group.add_argument("--pattern", action="append", default=[], metavar="NAME",
                       help="an integer-valued vector quantity (such as inclusion indicators) "
                            "whose most probable joint values the summary tables (repeatable)")
    group.add_argument("--set", action="append", default=[], metavar="NAME=JSON",
                       help="any other sampler setting, e.g. --set start_spread=1 (repeatable)")
    group.add_argument("--check", action="append", default=[], metavar="NAME=JSON",
                       help="a quality-check threshold, e.g. --check min_bulk_ess=1000 or "
                            "--check max_divergences=null to switch one off (repeatable)")
    group.add_argument("--label", action="append", default=[], metavar="KEY=VALUE",
                       help="a label to find the job by later (repeatable)")
    return common


def add_job_commands(commands: argparse._SubParsersAction) -> None:
    """Register submit, watch, fetch, cancel, list and check on the `drawyard` parser."""
    connection, waiting, submission = (
        _connection_options(), _waiting_options(), _submission_options()
    )
    formatter = argparse.RawDescriptionHelpFormatter

    def add(name: str, summary: str, description: str, parents, run, command: str):
        parser = commands.add_parser(
            name, help=summary, description=textwrap.fill(description, 78),
            epilog=EXIT_CODES_HELP,
            parents=parents, formatter_class=formatter,
        )
        parser.set_defaults(run=_guarded(command, run))
        return parser

    submit = add(
        "submit", "submit a job: a spec file, data files and sampler options",
        "Send a job to the service and print its id on stdout. With --wait, also wait for it "
        "to end (a progress bar is drawn when stdout is a terminal) and exit with a code that "
        "says how it ended.",
        [submission, connection, waiting], run_submit, "submit",
    )
    submit.add_argument("--wait", action="store_true",
                        help="wait for the job to end; the exit code tells how it ended")
    submit.add_argument("--idempotency-key", default=None, metavar="KEY",
                        help="key that makes a repeated submission return the first job "
                             "(default: a fresh random key, reused by this command's retries)")

    watch = add(
        "watch", "wait for a job to end, showing its progress",
        "Poll a job until it succeeds, fails or is cancelled; the exit code tells which, and "
        "whether a succeeded job passed its quality checks.",
        [connection, waiting], run_watch, "watch",
    )
    watch.add_argument("job", help="the job id")

    fetch = add(
        "fetch", "download a finished job's summary, draws or other results",
        "Write one of a succeeded job's results to a file (or stdout). Draws and sampler "
        "statistics are streamed to the file as they arrive.",
        [connection], run_fetch, "fetch",
    )
    fetch.add_argument("job", help="the job id")
    fetch.add_argument("what", nargs="?", choices=FETCHABLE, default="summary",
                       help="which result (default: summary)")
    fetch.add_argument("-o", "--output", type=Path, default=None, metavar="FILE",
                       help="file to write (default: stdout)")
    fetch.add_argument("--format", choices=("json", "csv", "parquet", "npz"), default="json",
                       help="for draws and sampler-stats (default: json)")
    fetch.add_argument("--layout", choices=("wide", "long"), default=None,
                       help="parquet and npz: one row per draw (wide, the default) or one row "
                            "per draw and quantity (long)")
    fetch.add_argument("--quantities", default=None, metavar="A,B",
                       help="only these columns: quantity names for draws, statistic names for "
                            "sampler-stats")
    fetch.add_argument("--chains", default=None, metavar="1,2", help="only these chains (from 1)")
    fetch.add_argument("--thin", type=int, default=None, metavar="N", help="every N-th draw")
    fetch.add_argument("--if-changed", action="store_true",
                       help="draws and sampler-stats with -o: keep the entity tag in FILE.etag "
                            "and download again only when the result differs (the service "
                            "answers 304 otherwise); the file is replaced only when complete")

    probabilities = add(
        "probabilities", "print a finished job's discrete quantities as probability tables",
        "For every integer-valued quantity of a finished job, the posterior probability of each "
        "value drawn (of 1, for a 0/1 quantity), and the joint-pattern tables asked for with "
        "submit --pattern, each probability with its Monte Carlo standard error after '±'.",
        [connection], run_probabilities, "probabilities",
    )
    probabilities.add_argument("job", help="the job id")

    cancel = add(
        "cancel", "cancel a job",
        "Ask the service to cancel a job: queued chains end at once, running ones within a "
        "couple of seconds. Prints the id and the state.",
        [connection, waiting], run_cancel, "cancel",
    )
    cancel.add_argument("job", help="the job id")
    cancel.add_argument("--wait", action="store_true",
                        help="wait until the job has actually stopped")

    listing = add(
        "list", "list jobs, newest first",
        "A header row, then one line per job: id, state, creation time, verdict and labels.",
        [connection], run_list, "list",
    )
    listing.add_argument("--state", action="append", default=[], metavar="STATE",
                         help=f"only jobs in these states ({', '.join(STATES)}; comma-separated "
                              "or repeated)")
    listing.add_argument("--verdict", action="append", default=[], metavar="VERDICT",
                         help=f"only jobs with this quality verdict ({', '.join(VERDICTS)}; "
                              "'none': not judged, as for a failed or cancelled job; "
                              "comma-separated or repeated)")
    listing.add_argument("--no-header", action="store_true",
                         help="leave out the header row (for scripts that read the lines)")
    listing.add_argument("--label", action="append", default=[], metavar="KEY:VALUE",
                         help="only jobs with this label (repeatable; all must match)")
    listing.add_argument("--limit", type=int, default=None, metavar="N",
                         help="jobs per page (default: the service's)")
    listing.add_argument("--all", action="store_true", help="follow every page")
    listing.add_argument("--json", action="store_true", help="print the jobs' JSON resources")

    check = add(
        "check", "validate a spec and data locally, as the service would",
        "Run the service's validation on the submission the same files and options would make, "
        "without a service: each problem is printed as 'pointer: message', exactly as the "
        "service's 422 answer would list it. For a pipeline's own CI.",
        [submission], run_check, "check",
    )
    check.add_argument("--max-chains", type=int, default=None, metavar="N",
                       help="the service's chain limit (default: $DRAWYARD_MAX_CHAINS, else 16)")
    check.add_argument("--max-draws", type=int, default=None, metavar="N",
                       help="the service's iteration limit (default: $DRAWYARD_MAX_DRAWS, else "
                            "100000)")
    check.add_argument("--json", action="store_true",
                       help="print the problem document the service would answer with")
