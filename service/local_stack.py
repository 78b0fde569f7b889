"""Start and stop a broker, the API server and Celery workers as child processes on this machine.

Used by `drawyard serve`, the demo, the test harness and the service benchmark, so that every one of
them launches the real parts the same way. Each child runs in its own process group so that stopping
it also stops the processes it forked (gunicorn's workers, Celery's pool processes).
"""

from __future__ import annotations

import atexit
import contextlib
import ctypes
import json
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import requests

SESSION_SECRET_VARIABLES = ("DRAWYARD_SESSION_SECRET", "DRAWYARD_SESSION_SECRET_FILE")
READY_PATH = "/v1/health/ready"
LIVE_PATH = "/v1/health/live"
APP_FACTORY = "service.app:create_app()"
CELERY_APP = "worker.celery_app:celery_app"
GUNICORN_CONFIG = "python:service.gunicorn_conf"

_PR_SET_PDEATHSIG = 1


class StartupError(RuntimeError):
    """A child process exited or never became ready; the message carries its log's tail."""


def free_port() -> int:
    """A TCP port on 127.0.0.1 that was free a moment ago (the kernel picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _die_with_parent() -> None:
    # Runs in the child between fork and exec: if the launching process dies without cleaning up
    # (SIGKILL, a crash), the kernel sends the child SIGTERM instead of leaving it orphaned.
    # The kernel ties this to the launching *thread*, so children are started from the main one.
    with contextlib.suppress(OSError, AttributeError):
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGTERM)


@dataclass(eq=False)
class ChildProcess:
    """One launched server or worker, its log file, and how to stop it."""

    name: str
    popen: subprocess.Popen[bytes]
    log_path: Path
    stop_signal: int = signal.SIGTERM
    grace_seconds: float = 10.0

    @property
    def pid(self) -> int:
        return self.popen.pid

    def alive(self) -> bool:
        return self.popen.poll() is None

    def signal_leader(self, signum: int) -> None:
        """Signal only the launched process, which then shuts down what it forked its own way."""
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.kill(self.popen.pid, signum)

    def signal_group(self, signum: int) -> None:
        """Send a signal to the child and everything it forked."""
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.killpg(self.popen.pid, signum)

    def kill(self) -> None:
        """SIGKILL the whole group at once (a crash, as far as anyone else can tell) and reap it."""
        self.signal_group(signal.SIGKILL)
        with contextlib.suppress(subprocess.TimeoutExpired):
            self.popen.wait(timeout=10)
        _running.discard(self)

    def stop(self) -> None:
        """Ask politely with the stop signal, then SIGKILL the group after the grace period."""
        if self.alive():
            # Only the leader: Celery's main process warm-stops its pool, gunicorn's arbiter its
            # workers, the postmaster its backends; signalling them all at once breaks that order.
            self.signal_leader(self.stop_signal)
            try:
                self.popen.wait(timeout=self.grace_seconds)
            except subprocess.TimeoutExpired:
                pass
        # Stragglers in the group (pool processes, backends) go too, even if the leader exited.
        self.signal_group(signal.SIGKILL)
        with contextlib.suppress(subprocess.TimeoutExpired):
            self.popen.wait(timeout=10)
        _running.discard(self)

    def log_tail(self, lines: int = 40) -> str:
        try:
            text = self.log_path.read_text(errors="replace")
        except OSError:
            return ""
        return "\n".join(text.splitlines()[-lines:])


_running: set[ChildProcess] = set()


def _stop_all_children() -> None:
    for child in list(_running):
        child.stop()


atexit.register(_stop_all_children)


def start_child(
    name: str,
    argv: Sequence[str],
    log_path: Path,
    env: Mapping[str, str] | None = None,
    cwd: Path | None = None,
    stop_signal: int = signal.SIGTERM,
    grace_seconds: float = 10.0,
    user: str | None = None,
) -> ChildProcess:
    """Launch argv in a new session with output to log_path; it is stopped at interpreter exit."""
    log_path.parent.mkdir(parents=True, exist_ok=True)
    full_env = dict(os.environ)
    if env:
        full_env.update(env)
    with open(log_path, "ab") as log:
        popen = subprocess.Popen(
            list(argv),
            stdin=subprocess.DEVNULL,
            stdout=log,
            stderr=subprocess.STDOUT,
            env=full_env,
            cwd=str(cwd) if cwd else None,
            start_new_session=True,
            preexec_fn=_die_with_parent,
            user=user,
        )
    child = ChildProcess(name, popen, log_path, stop_signal, grace_seconds)
    _running.add(child)
    return child


def wait_until(
    ready: Callable[[], bool],
    children: Sequence[ChildProcess],
    timeout: float,
    what: str,
) -> None:
    """Poll ready() until it is true; fail early, with the log, when a child has exited."""
    deadline = time.monotonic() + timeout
    while True:
        for child in children:
            if not child.alive():
                raise StartupError(
                    f"{child.name} exited with status {child.popen.returncode} while waiting for "
                    f"{what}; last lines of {child.log_path}:\n{child.log_tail()}"
                )
        if ready():
            return
        if time.monotonic() > deadline:
            tails = "\n".join(f"--- {c.name} ({c.log_path}):\n{c.log_tail()}" for c in children)
            raise StartupError(f"timed out after {timeout:.0f} s waiting for {what}\n{tails}")
        time.sleep(0.05)


def start_on_port(
    port: int,
    launch: Callable[[int], ChildProcess],
    ready: Callable[[], bool],
    timeout: float,
    what: str,
) -> ChildProcess:
    """Start a server with ``launch(port)`` and wait until ``ready()``.

    ``port`` 0 means a free one; free_port() cannot reserve it, so someone else may bind it before
    the server does: then try again on another, up to three ports in all.
    """
    attempts = 1 if port else 3
    for attempt in range(attempts):
        chosen = port or free_port()
        child = launch(chosen)
        try:
            wait_until(ready, [child], timeout, f"{what} on port {chosen}")
            return child
        except StartupError:
            child.stop()
            if attempt == attempts - 1:
                raise
    raise AssertionError("unreachable: the last attempt returns or raises")


# --- Redis ------------------------------------------------------------------------------------


def redis_installed() -> bool:
    return shutil.which("redis-server") is not None


@dataclass
class RedisServer:
    """A private redis-server on a loopback port, no persistence; restartable on the same port."""

    directory: Path
    port: int = 0
    child: ChildProcess | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self, timeout: float = 20.0) -> RedisServer:
        self.directory.mkdir(parents=True, exist_ok=True)

        def launch(port: int) -> ChildProcess:
            self.port = port
            return start_child(
                "redis-server",
                [
                    "redis-server", "--port", str(port), "--bind", "127.0.0.1",
                    "--save", "", "--appendonly", "no", "--dir", str(self.directory),
                ],
                self.directory / "redis.log",
                grace_seconds=5.0,
            )

        self.child = start_on_port(self.port, launch, self.ping, timeout, "redis-server")
        return self

    def ping(self) -> bool:
        import redis

        try:
            return bool(redis.Redis(port=self.port, socket_timeout=1).ping())
        except redis.RedisError:
            return False

    def flush(self) -> None:
        import redis

        redis.Redis(port=self.port, socket_timeout=5).flushall()

    def stop(self) -> None:
        if self.child is not None:
            self.child.stop()
            self.child = None

    def restart(self, down_seconds: float = 0.0) -> None:
        """Stop and start again on the same port (contents are lost: there is no persistence)."""
        self.stop()
        time.sleep(down_seconds)
        self.start()


# --- API and workers ---------------------------------------------------------------------------


def service_env(database_url: str, broker_url: str, extra: Mapping[str, str] | None = None) -> dict:
    """The DRAWYARD_* settings the API and the workers share."""
    env = {"DRAWYARD_DATABASE_URL": database_url, "DRAWYARD_BROKER_URL": broker_url}
    # One secret for the whole stack signs browser sessions, so any API process can read a cookie
    # another made; a new one each start signs every browser out, which a local stack can afford.
    if not any(name in os.environ for name in SESSION_SECRET_VARIABLES):
        env["DRAWYARD_SESSION_SECRET"] = secrets.token_urlsafe(32)
    # Child Pythons must not buffer logs, or a crash loses the lines that explain it.
    env["PYTHONUNBUFFERED"] = "1"
    if extra:
        env.update(extra)
    return env


# What each long-running part runs, without the interpreter: docker-compose.yml runs the same
# (tests/infra/test_compose.py compares them), so a local stack and a deployment cannot drift.
def api_command(host: str, port: int, processes: int) -> list[str]:
    return [
        "gunicorn",
        "--config", GUNICORN_CONFIG,
        "--bind", f"{host}:{port}",
        "--workers", str(processes),
        APP_FACTORY,
    ]


def worker_command(name: str, concurrency: int) -> list[str]:
    # --quiet: no start-up banner, which is plain text among the JSON log lines.
    return [
        "celery", "-A", CELERY_APP, "--quiet", "worker",
        "--concurrency", str(concurrency), "--prefetch-multiplier", "1",
        "-n", name, "--loglevel", "INFO",
    ]


def closing_worker_command(name: str, queue: str, threads: int) -> list[str]:
    # Threads, not forked processes: callbacks mostly wait on the network, and a finishing step
    # is short.
    return [
        "celery", "-A", CELERY_APP, "--quiet", "worker",
        "-Q", queue, "--pool", "threads", "--concurrency", str(threads),
        "--prefetch-multiplier", "1", "-n", name, "--loglevel", "INFO",
    ]


# The console command `drawyard sweeper` (pyproject's drawyard = service.cli:main).
SWEEPER_COMMAND = ["service.cli", "sweeper"]


def metrics_env(folder: Path) -> dict[str, str]:
    """The metrics folder every process of one stack shares (service/metrics.py), emptied first:
    a new stack starts its counters from zero, as a restarted deployment may."""
    folder.mkdir(parents=True, exist_ok=True)
    for stale in folder.glob("*.db"):
        stale.unlink()
    return {"PROMETHEUS_MULTIPROC_DIR": str(folder)}


def start_api(
    port: int,
    env: Mapping[str, str],
    log_path: Path,
    host: str = "127.0.0.1",
    processes: int = 1,
) -> ChildProcess:
    """gunicorn serving the app factory with the production settings of gunicorn_conf.py."""
    argv = [sys.executable, "-m", *api_command(host, port, processes)]
    # SIGINT is gunicorn's quick shutdown; SIGTERM would wait for slow clients.
    return start_child("api", argv, log_path, env, stop_signal=signal.SIGINT, grace_seconds=10.0)


def start_worker(
    index: int,
    env: Mapping[str, str],
    log_path: Path,
    concurrency: int = 1,
) -> ChildProcess:
    """One Celery worker process (a main process plus `concurrency` pool processes)."""
    argv = [sys.executable, "-m", *worker_command(f"w{index}@%h", concurrency)]
    # One machine: no worker-to-worker chatter to wait for at start-up.
    argv += ["--without-heartbeat", "--without-gossip", "--without-mingle"]
    # Warm shutdown (SIGTERM) lets a running chain notice and stop; late acknowledgement puts any
    # unfinished chain back on the queue, so the grace period can be short.
    return start_child(f"worker {index}", argv, log_path, single_threaded_numerics(env),
                       grace_seconds=15.0)


def start_closing_worker(env: Mapping[str, str], log_path: Path, threads: int = 4) -> ChildProcess:
    """The Celery worker of the closing queue: finishing steps and completion callbacks.

    Its own process and queue, so a job's end never waits behind other jobs' chains and a slow
    callback receiver never holds a chain's process.
    """
    from service.config import load_settings

    queue = load_settings(environ={**os.environ, **env}).closing_queue
    argv = [sys.executable, "-m", *closing_worker_command("closing@%h", queue, threads)]
    argv += ["--without-heartbeat", "--without-gossip", "--without-mingle"]
    return start_child("closing worker", argv, log_path, single_threaded_numerics(env),
                       grace_seconds=15.0)


NUMERIC_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def single_threaded_numerics(env: Mapping[str, str]) -> dict[str, str]:
    """env plus one BLAS/OpenMP thread per process, unless the caller or the environment says.

    A worker runs one chain per pool process and the deployment runs about one process per core;
    extra BLAS threads in every process would only fight each other for the same cores.
    """
    out = dict(env)
    for name in NUMERIC_THREAD_VARIABLES:
        if name not in out and name not in os.environ:
            out[name] = "1"
    return out


def start_sweeper(env: Mapping[str, str], log_path: Path) -> ChildProcess:
    """The sweeper (service/sweeper.py): requeues chains whose worker died or task was lost."""
    argv = [sys.executable, "-m", *SWEEPER_COMMAND]
    return start_child("sweeper", argv, log_path, env, grace_seconds=5.0)


def api_ready(base_url: str) -> Callable[[], bool]:
    def ready() -> bool:
        try:
            return requests.get(base_url + READY_PATH, timeout=2).status_code == 200
        except requests.RequestException:
            return False

    return ready


def run_migrations(database_url: str) -> None:
    from service.store import migrate

    migrate(database_url)


# --- A whole local stack -----------------------------------------------------------------------


@dataclass
class LocalStack:
    """A broker (or none, for the filesystem transport), the API and N workers for one machine."""

    var_dir: Path
    database_url: str | None = None
    broker: str = "auto"  # "auto" | "redis" | "filesystem" | an explicit broker URL
    workers: int = 1
    concurrency: int = 1
    host: str = "127.0.0.1"
    port: int = 0
    extra_env: dict[str, str] = field(default_factory=dict)
    redis: RedisServer | None = None
    api: ChildProcess | None = None
    worker_processes: list[ChildProcess] = field(default_factory=list)
    closing_worker: ChildProcess | None = None
    sweeper: ChildProcess | None = None
    broker_url: str = ""
    broker_note: str = ""
    broker_warning: str = ""

    @property
    def base_url(self) -> str:
        shown = "127.0.0.1" if self.host in ("0.0.0.0", "") else self.host
        return f"http://{shown}:{self.port}"

    def _choose_broker(self) -> dict[str, str]:
        env: dict[str, str] = {}
        wants_redis = self.broker == "redis" or (self.broker == "auto" and redis_installed())
        if wants_redis:
            self.redis = RedisServer(self.var_dir / "redis").start()
            self.broker_url = self.redis.url
            self.broker_note = f"private redis-server on port {self.redis.port}"
        elif self.broker in ("auto", "filesystem") or self.broker.startswith("filesystem://"):
            folder = Path(os.environ.get("DRAWYARD_BROKER_FOLDER") or self.var_dir / "broker")
            folder.mkdir(parents=True, exist_ok=True)
            self.broker_url = "filesystem://"
            env["DRAWYARD_BROKER_FOLDER"] = str(folder)
            # The filesystem transport finds new messages by polling the folder, once a second by
            # default; a fifth of a second keeps chains from idling in the queue for long.
            if "DRAWYARD_BROKER_LIBRARY_OPTIONS" not in os.environ:
                env["DRAWYARD_BROKER_LIBRARY_OPTIONS"] = json.dumps({"polling_interval": 0.2})
            self.broker_note = f"filesystem broker in {folder} (single machine only)"
            self.broker_warning = (
                f"SERVERLESS FILESYSTEM BROKER in {folder}: SINGLE MACHINE ONLY. Workers on other "
                "machines cannot see these queues; install redis-server or set a redis:// broker "
                "for anything beyond one machine."
            )
        else:
            self.broker_url = self.broker
            self.broker_note = f"broker {self.broker}"
        return env

    def start(self, timeout: float = 90.0) -> LocalStack:
        self.var_dir.mkdir(parents=True, exist_ok=True)
        if self.database_url is None:
            self.database_url = f"sqlite:///{(self.var_dir / 'drawyard.sqlite').resolve()}"
        try:
            env = self._choose_broker()
            env.update(metrics_env(self.var_dir / "metrics"))
            env.update(self.extra_env)
            env = service_env(self.database_url, self.broker_url, env)
            run_migrations(self.database_url)
            self.port = self.port or free_port()
            logs = self.var_dir / "logs"
            self.api = start_api(self.port, env, logs / "api.log", host=self.host)
            self.worker_processes = [
                start_worker(i, env, logs / f"worker{i}.log", self.concurrency)
                for i in range(self.workers)
            ]
            self.closing_worker = start_closing_worker(env, logs / "closing.log")
            self.sweeper = start_sweeper(env, logs / "sweeper.log")
            wait_until(
                api_ready(self.base_url),
                [self.api, *self.worker_processes, self.closing_worker],
                timeout,
                f"the API to answer {self.base_url}{READY_PATH}",
            )
        except BaseException:
            self.stop()
            raise
        return self

    def children(self) -> list[ChildProcess]:
        out = [c for c in [self.api, *self.worker_processes, self.closing_worker, self.sweeper]
               if c is not None]
        if self.redis is not None and self.redis.child is not None:
            out.append(self.redis.child)
        return out

    def stop(self) -> None:
        """Workers first (so no chain is left holding the broker), then the API, then the broker."""
        for worker in self.worker_processes:
            worker.signal_leader(worker.stop_signal)
        for worker in self.worker_processes:
            worker.stop()
        if self.closing_worker is not None:
            self.closing_worker.stop()
        if self.sweeper is not None:
            self.sweeper.stop()
        if self.api is not None:
            self.api.stop()
        if self.redis is not None:
            self.redis.stop()

    @contextlib.contextmanager
    def running(self, timeout: float = 90.0) -> Iterator[LocalStack]:
        self.start(timeout)
        try:
            yield self
        finally:
            self.stop()
