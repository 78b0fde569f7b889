"""A worker-only fire drill: make one chosen chain kill its own worker process at an iteration.

For the fault tests of a chain that keeps crashing its worker. It is switched on only by an
environment variable of the worker process,
``DRAWYARD_DRILL_KILL_CHAIN="<chain number>@<iteration>"`` (chain numbers 1-based, as in the API);
it is not a service setting, so neither a request nor the API's configuration can reach it.
"""

from __future__ import annotations

import functools
import os
import signal

DRILL_VARIABLE = "DRAWYARD_DRILL_KILL_CHAIN"


@functools.cache
def kill_point() -> tuple[int, int] | None:
    """(0-based chain index, iteration) from the environment, or None when the drill is off."""
    raw = os.environ.get(DRILL_VARIABLE, "").strip()
    if not raw:
        return None
    chain, _, iteration = raw.partition("@")
    return int(chain) - 1, int(iteration)


def maybe_kill(chain_index: int, iteration: int) -> None:
    """SIGKILL this process when the drill names this chain and it has reached the iteration."""
    point = kill_point()
    if point is not None and chain_index == point[0] and iteration >= point[1]:
        # SIGKILL, not an exception: the point is a process that vanishes without cleaning up.
        os.kill(os.getpid(), signal.SIGKILL)
