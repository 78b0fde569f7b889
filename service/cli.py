"""The `drawyard` console command: a local service for one user, migrations, and a worker."""

from __future__ import annotations

import argparse
import os
import signal
import socket
import sys
import textwrap
import time
from collections.abc import Sequence
from pathlib import Path
from typing import NoReturn

from service.access.commands import add_keys_command, serve_host
from service.config import load_settings
from service.local_stack import CELERY_APP, LocalStack, StartupError
from service.versions import software_versions

LOG_LEVELS = ("DEBUG", "INFO", "WARNING", "ERROR")
# 128 + SIGPIPE: what a shell reports for a filter whose reader closed the pipe.
EXIT_BROKEN_PIPE = 141

BANNER_WIDTH = 78


def loud(paragraphs: Sequence[str]) -> str:
    """A framed block that stands out in a terminal full of log lines."""
    bar = "!" * BANNER_WIDTH
    body = [f"!! {line}" for text in paragraphs
            for line in textwrap.wrap(text, width=BANNER_WIDTH - 3)]
    return "\n".join([bar, *body, bar])


def _add_serve(commands: argparse._SubParsersAction) -> None:
    serve = commands.add_parser(
        "serve",
        help="run the API, one worker and a broker on this machine until Ctrl-C",
        description=(
            "Start a local drawyard for one user: a SQLite store under --var, a private "
            "redis-server when one is installed (otherwise a serverless filesystem broker that "
            "works on this machine only), migrations, the API under gunicorn and Celery workers. "
            "Ctrl-C stops everything it started."
        ),
    )
    serve.add_argument("--var", type=Path, default=Path("var"),
                       help="folder for the database, broker files and logs (default: ./var)")
    serve.add_argument("--host", default="127.0.0.1",
                       help="address the API listens on (default: 127.0.0.1)")
    serve.add_argument("--port", type=int, default=8000, help="API port (default: 8000)")
    serve.add_argument("--workers", type=int, default=1,
                       help="number of worker processes, one chain at a time each (default: 1)")
    serve.add_argument(
        "--broker", default=None,
        help="'auto' (default: private redis-server if installed, else the filesystem broker), "
             "'redis', 'filesystem', or a broker URL; DRAWYARD_BROKER_URL, when set, is used "
             "instead of 'auto'",
    )
    serve.add_argument(
        "--database-url", default=None,
        help="store URL (default: DRAWYARD_DATABASE_URL if set, else a SQLite file under --var)",
    )
    serve.set_defaults(run=run_serve)


def _add_migrate(commands: argparse._SubParsersAction) -> None:
    migrate = commands.add_parser(
        "migrate",
        help="create or upgrade the results store's tables",
        description="Apply the store's migrations up to the newest revision.",
    )
    migrate.add_argument(
        "--database-url", default=None,
        help="store URL (default: DRAWYARD_DATABASE_URL, else sqlite:///var/drawyard.sqlite)",
    )
    migrate.set_defaults(run=run_migrate)


def _add_worker(commands: argparse._SubParsersAction) -> None:
    worker = commands.add_parser(
        "worker",
        help="run one Celery worker process in the foreground",
        description=(
            "Run a worker that takes chains from the broker in DRAWYARD_BROKER_URL and writes "
            "to the store in DRAWYARD_DATABASE_URL. Start one per core."
        ),
    )
    worker.add_argument("--processes", type=int, default=None,
                        help="chains this worker runs side by side, one process each (default: "
                             "1); with --closing, threads (default: 4)")
    worker.add_argument("--closing", action="store_true",
                        help="run finishing steps and completion callbacks (the closing queue, "
                             "DRAWYARD_CLOSING_QUEUE) in threads instead of chains; a deployment "
                             "runs at least one such worker")
    worker.add_argument("--name", default=None,
                        help="this worker's name in logs and metrics (default: drawyard@<host>)")
    worker.add_argument("--logging", default="INFO", choices=LOG_LEVELS,
                        help="the least severe log records written (default: INFO)")
    worker.add_argument("library_options", nargs=argparse.REMAINDER, metavar="-- OPTION",
                        help="after --, options passed unchanged to the queue library's worker")
    worker.set_defaults(run=run_worker)


def build_parser() -> argparse.ArgumentParser:
    from service.job_commands import add_connection_group

    parser = argparse.ArgumentParser(
        prog="drawyard",
        description="Bayesian posterior sampling as queued jobs behind a REST API. The service "
        "options may be given before the command as well as after it.",
    )
    parser.add_argument("--version", action="version",
                        version=f"drawyard {software_versions()['drawyard']}")
    add_connection_group(parser)
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    _add_serve(commands)
    _add_migrate(commands)
    _add_worker(commands)
    sweeper = commands.add_parser(
        "sweeper",
        help="requeue chains whose worker died or whose task the broker lost",
        description="Look at the store every DRAWYARD_SWEEP_INTERVAL seconds and send lost chain "
        "tasks again (service/sweeper.py). Safe to run more than one.",
    )
    sweeper.add_argument("--once", action="store_true", help="sweep once and exit")
    sweeper.add_argument("--check", action="store_true",
                         help="exit 0 if a sweep reached the store recently, else 1")
    sweeper.set_defaults(run=lambda args: _sweeper_main(
        ["--once"] * args.once + ["--check"] * args.check))
    add_keys_command(commands)
    from service.job_commands import add_job_commands

    add_job_commands(commands)
    from service.model_commands import add_models_command

    add_models_command(commands)
    from service.assessment_commands import add_assessment_commands

    add_assessment_commands(commands)
    return parser


def _serve_database_url(args: argparse.Namespace) -> str:
    if args.database_url:
        return args.database_url
    if os.environ.get("DRAWYARD_DATABASE_URL"):
        return os.environ["DRAWYARD_DATABASE_URL"]
    return f"sqlite:///{(args.var / 'drawyard.sqlite').resolve()}"


class _Stop(Exception):
    pass


def _raise_stop(signum: int, frame: object) -> None:
    raise _Stop(signal.Signals(signum).name)


def run_serve(args: argparse.Namespace) -> int:
    broker = args.broker or os.environ.get("DRAWYARD_BROKER_URL") or "auto"
    host, open_warning = serve_host(_serve_database_url(args), args.host)
    if open_warning:
        print(loud([open_warning]), flush=True)
    stack = LocalStack(
        var_dir=args.var.resolve(),
        database_url=_serve_database_url(args),
        broker=broker,
        workers=args.workers,
        host=host,
        port=args.port,
    )
    # Children run in their own sessions, so Ctrl-C reaches only this process, which then stops
    # them in order: workers, API, broker.
    signal.signal(signal.SIGTERM, _raise_stop)
    signal.signal(signal.SIGINT, _raise_stop)
    try:
        stack.start()
    except (_Stop, StartupError) as error:
        stack.stop()
        print(f"drawyard serve: could not start: {error}", file=sys.stderr)
        return 1
    if stack.broker_warning:
        print(loud([stack.broker_warning]), flush=True)
    print(
        f"drawyard is serving at {stack.base_url}\n"
        f"  store:   {stack.database_url}\n"
        f"  broker:  {stack.broker_note}\n"
        f"  workers: {args.workers}\n"
        f"  logs:    {stack.var_dir / 'logs'}\n"
        f"  try:     curl {stack.base_url}/v1/health/ready\n"
        "Press Ctrl-C to stop.",
        flush=True,
    )
    status = 0
    try:
        while True:
            dead = [child for child in stack.children() if not child.alive()]
            if dead:
                for child in dead:
                    print(
                        f"drawyard serve: {child.name} exited ({child.popen.returncode}); "
                        f"last lines of {child.log_path}:\n{child.log_tail()}",
                        file=sys.stderr,
                    )
                status = 1
                break
            time.sleep(0.5)
    except _Stop:
        print("\nstopping workers, API and broker ...", flush=True)
    finally:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        stack.stop()
    return status


def run_migrate(args: argparse.Namespace) -> int:
    from service.config import load_settings
    from service.store import migrate

    url = args.database_url or load_settings().database_url
    migrate(url)
    print(f"store at {url} is at the newest revision")
    return 0


def _sweeper_main(argv: list[str]) -> int:
    from service.sweeper import main as sweeper_main

    return sweeper_main(argv)


def run_worker(args: argparse.Namespace) -> NoReturn:
    name = args.name or f"drawyard{'-closing' if args.closing else ''}@{socket.gethostname()}"
    passed = [o for o in args.library_options if o != "--"]
    processes = args.processes or (4 if args.closing else 1)
    # drawyard's words mapped onto the library's options; one task per process at a time, so a
    # long chain never holds a second one back
    argv = [
        sys.executable, "-m", "celery", "-A", CELERY_APP, "--quiet", "worker",
        "--concurrency", str(processes), "--prefetch-multiplier", "1",
        "-n", name, "--loglevel", args.logging, *passed,
    ]
    if args.closing:
        argv += ["-Q", load_settings().closing_queue, "--pool", "threads"]
    # Replace this process so that signals from a supervisor reach the worker itself.
    os.execv(sys.executable, argv)


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        status = int(args.run(args))
        sys.stdout.flush()
    except BrokenPipeError:
        # The reader went away (`drawyard list | head`): stop quietly, as other filters do. Python
        # would flush stdout again at exit and fail once more, so it is pointed at nothing.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_BROKEN_PIPE
    return status


if __name__ == "__main__":
    sys.exit(main())
