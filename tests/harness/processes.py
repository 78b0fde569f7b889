"""Looking at processes from outside, to check that nothing outlives the stack that started it."""

import os
import time
from pathlib import Path


def _stat_fields(pid: int) -> list[str]:
    # The command name in /proc/<pid>/stat is parenthesised and may hold spaces: split after it.
    return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()


def pid_gone(pid: int, within: float = 10.0) -> bool:
    """True once pid has exited (a zombie counts: it has exited, only not yet been reaped)."""
    deadline = time.monotonic() + within
    while time.monotonic() < deadline:
        try:
            os.kill(pid, 0)
            if _stat_fields(pid)[0] == "Z":
                return True
        except (ProcessLookupError, OSError):
            return True
        time.sleep(0.05)
    return False


def children_of(pid: int) -> list[int]:
    """Direct children of pid (the parent pid is the second field after the command name)."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            if int(_stat_fields(int(entry.name))[1]) == pid:
                found.append(int(entry.name))
        except (OSError, IndexError):
            continue
    return found


def descendants_of(pid: int) -> list[int]:
    out, frontier = [], [pid]
    while frontier:
        kids = children_of(frontier.pop())
        out.extend(kids)
        frontier.extend(kids)
    return out
