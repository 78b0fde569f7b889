"""A private PostgreSQL cluster in a temporary directory, on a loopback port, with trust auth.

PostgreSQL refuses to run as root, and CI runs as root: then initdb and postgres run as the
`postgres` system user (created by Debian's package), or as a dedicated system user made here when
that account does not exist. Run as anyone else, they simply run as the current user.
"""

from __future__ import annotations

import atexit
import glob
import os
import pwd
import shutil
import signal
import subprocess
import tempfile
import uuid
from dataclasses import dataclass, field
from pathlib import Path

from service.local_stack import ChildProcess, StartupError, start_child, start_on_port

DEDICATED_USER = "drawyard-pg"


def find_postgres_bin() -> Path | None:
    """The newest /usr/lib/postgresql/<major>/bin that holds initdb (Debian's layout)."""
    majors = [Path(p).parent.parent for p in glob.glob("/usr/lib/postgresql/*/bin/initdb")]
    numbered = sorted((int(m.name), m) for m in majors if m.name.isdigit())
    if numbered:
        return numbered[-1][1] / "bin"
    on_path = shutil.which("initdb")
    return Path(on_path).parent if on_path else None


def server_user() -> str | None:
    """Whom to run the server as: None (ourselves) unless we are root."""
    if os.geteuid() != 0:
        return None
    for name in ("postgres", DEDICATED_USER):
        try:
            pwd.getpwnam(name)
            return name
        except KeyError:
            continue
    subprocess.run(
        ["useradd", "--system", "--no-create-home", "--shell", "/usr/sbin/nologin", DEDICATED_USER],
        check=True,
    )
    return DEDICATED_USER


def _give_to(path: Path, user: str | None) -> None:
    if user is None:
        return
    entry = pwd.getpwnam(user)
    os.chown(path, entry.pw_uid, entry.pw_gid)


@dataclass
class PostgresServer:
    """initdb + postgres; `url` is the server's base URL, `create_database()` gives a fresh one.

    The cluster lives in its own directory under the system temp dir (not pytest's, whose parents
    are private to root and so closed to the server's user) and is deleted by stop().
    """

    directory: Path | None = None
    port: int = 0
    user: str | None = None
    child: ChildProcess | None = None
    databases: list[str] = field(default_factory=list)

    superuser = "postgres"

    def base_url(self, database: str = "postgres") -> str:
        return f"postgresql+psycopg://{self.superuser}@127.0.0.1:{self.port}/{database}"

    @property
    def url(self) -> str:
        return self.base_url()

    def _conninfo(self, database: str = "postgres") -> str:
        return f"host=127.0.0.1 port={self.port} user={self.superuser} dbname={database}"

    def start(self, timeout: float = 60.0) -> PostgresServer:
        bin_dir = find_postgres_bin()
        if bin_dir is None:
            raise StartupError(
                "PostgreSQL is not installed (no /usr/lib/postgresql/*/bin/initdb); "
                "run tests/harness/install_services.sh"
            )
        self.user = server_user()
        if self.directory is None:
            self.directory = Path(tempfile.mkdtemp(prefix="drawyard-pg-"))
            # Registered after service.local_stack's own hook, so it runs first (hooks run in
            # reverse): the server stops, then its directory goes, even if nobody calls stop().
            atexit.register(self.stop)
        self.directory.mkdir(parents=True, exist_ok=True)
        # Everything the server touches lives in this directory, owned by the server's user.
        _give_to(self.directory, self.user)
        data, sockets = self.directory / "data", self.directory / "sockets"
        sockets.mkdir(exist_ok=True)
        _give_to(sockets, self.user)
        if not (data / "PG_VERSION").exists():
            init = subprocess.run(
                [
                    str(bin_dir / "initdb"), "-D", str(data), "-U", self.superuser,
                    "--auth=trust", "--no-sync", "--encoding=UTF8", "--locale=C",
                ],
                user=self.user,
                cwd=str(self.directory),
                capture_output=True,
                text=True,
            )
            if init.returncode != 0:
                raise StartupError(f"initdb failed:\n{init.stdout}\n{init.stderr}")
        def launch(port: int) -> ChildProcess:
            self.port = port
            return start_child(
                "postgres",
                [
                    str(bin_dir / "postgres"), "-D", str(data), "-p", str(port),
                    "-k", str(sockets), "-c", "listen_addresses=127.0.0.1",
                    # Test data is disposable: skip the durability work to keep the suite fast.
                    "-c", "fsync=off", "-c", "synchronous_commit=off",
                    "-c", "full_page_writes=off", "-c", "max_connections=200",
                ],
                self.directory / "postgres.log",
                cwd=self.directory,
                # SIGINT is PostgreSQL's "fast" shutdown; SIGTERM waits for every client to leave.
                stop_signal=signal.SIGINT,
                grace_seconds=15.0,
                user=self.user,
            )

        self.child = start_on_port(self.port, launch, self.answers, timeout, "PostgreSQL")
        return self

    def answers(self) -> bool:
        import psycopg

        try:
            with psycopg.connect(self._conninfo(), connect_timeout=2) as conn:
                conn.execute("SELECT 1")
            return True
        except psycopg.Error:
            return False

    def create_database(self, prefix: str = "t") -> str:
        """A new empty database; returns its SQLAlchemy URL."""
        import psycopg

        name = f"{prefix}_{uuid.uuid4().hex[:12]}"
        with psycopg.connect(self._conninfo(), autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        self.databases.append(name)
        return self.base_url(name)

    def stop(self, remove: bool = True) -> None:
        if self.child is not None:
            self.child.stop()
            self.child = None
        if remove and self.directory is not None:
            shutil.rmtree(self.directory, ignore_errors=True)
