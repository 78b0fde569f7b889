"""Shared by the security tests: keys made through the real `drawyard keys` command."""

from __future__ import annotations

import os
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

REPO_ROOT = Path(__file__).resolve().parents[2]


@dataclass(frozen=True)
class CliKey:
    key_id: str
    secret: str

    @property
    def headers(self) -> dict[str, str]:
        return {"Authorization": f"Bearer {self.secret}"}


def drawyard(database_url: str, *args: str) -> subprocess.CompletedProcess:
    """Run the console command in a fresh process, as an operator would."""
    env = {**os.environ, "DRAWYARD_DATABASE_URL": database_url}
    return subprocess.run(
        [sys.executable, "-m", "service.cli", *args],
        cwd=REPO_ROOT, env=env, capture_output=True, text=True, timeout=60,
    )


def create_key(database_url: str, tenant: str, scopes: str = "submit,read") -> CliKey:
    done = drawyard(database_url, "keys", "create", "--tenant", tenant, "--scopes", scopes)
    assert done.returncode == 0, done.stderr
    # The secret alone on stdout (so KEY=$(drawyard keys create ...) is the key), the rest on
    # stderr.
    assert len(done.stdout.splitlines()) == 1, done.stdout
    fields = dict(line.split(":", 1) for line in done.stderr.splitlines() if ":" in line)
    return CliKey(fields["key id"].strip(), done.stdout.strip())
