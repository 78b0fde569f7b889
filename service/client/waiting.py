"""Waiting for a job to end: poll its state, with a progress bar only when someone is watching."""

from __future__ import annotations

import shutil
import sys
import time
from collections.abc import Callable
from typing import TextIO

from service.client.errors import ClientError
from service.client.http import DrawyardClient
from service.client.records import TERMINAL_STATES, Job

BAR_WIDTH = 30


class WaitTimedOut(ClientError):
    """The job had not ended when the caller's time ran out; `job` is its last known state."""

    def __init__(self, job: Job, seconds: float):
        self.job = job
        super().__init__(f"job {job.id} is still {job.state} after {seconds:g} s")


def progress_line(job: Job) -> str:
    """One line: a bar over all chains' iterations, the state, each phase and the divergences."""
    share = min(1.0, max(0.0, job.progress))
    filled = round(share * BAR_WIDTH)
    phases = sorted({c.phase for c in job.chains if c.phase})
    divergences = sum(c.divergences for c in job.chains)
    # A chain that stopped (at the time limit, say) is done too: it will not move the bar again.
    done = sum(1 for c in job.chains if c.state in TERMINAL_STATES)
    return (
        f"[{'#' * filled}{'.' * (BAR_WIDTH - filled)}] {share:4.0%} {job.state:<9} "
        f"chains {done}/{len(job.chains)} done  {'/'.join(phases) or '-':<15} "
        f"divergences {divergences}"
    )


class ProgressBar:
    """Redraws one terminal line in place; draws nothing at all when `enabled` is false."""

    def __init__(self, stream: TextIO, enabled: bool):
        self.stream = stream
        self.enabled = enabled
        self.drawn = False

    def show(self, job: Job) -> None:
        if not self.enabled:
            return
        columns = shutil.get_terminal_size((100, 20)).columns
        self.stream.write("\r" + progress_line(job)[: columns - 1].ljust(columns - 1))
        self.stream.flush()
        self.drawn = True

    def close(self) -> None:
        if self.drawn:
            self.stream.write("\n")
            self.stream.flush()


def wait_for_job(
    client: DrawyardClient,
    job_id: str,
    *,
    interval: float = 1.0,
    timeout: float | None = None,
    progress: bool | None = None,
    stream: TextIO | None = None,
    on_update: Callable[[Job], None] | None = None,
    clock: Callable[[], float] = time.monotonic,
) -> Job:
    """Poll GET /v1/jobs/{id} every `interval` seconds until the job succeeds, fails or is
    cancelled, and return it. `progress=None` shows a bar only when stdout is a terminal, so logs
    of a pipeline stay free of carriage returns. Raises WaitTimedOut after `timeout` seconds."""
    stream = stream or sys.stdout
    if progress is None:
        progress = stream.isatty()
    bar = ProgressBar(stream, progress)
    started = clock()
    try:
        while True:
            job = client.job(job_id)
            bar.show(job)
            if on_update is not None:
                on_update(job)
            if job.finished:
                return job
            waited = clock() - started
            if timeout is not None and waited >= timeout:
                raise WaitTimedOut(job, timeout)
            pause = interval if timeout is None else min(interval, timeout - waited)
            client.sleep(max(0.0, pause))
    finally:
        bar.close()
