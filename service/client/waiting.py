"""Waiting for a job to end: poll its state, with a progress bar only when someone is watching."""

from __future__ import annotations

import shutil
import sys
import time
from collections.abc import Callable
from datetime import UTC, datetime
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


def clock_text(seconds: float) -> str:
    """``M:SS``, or ``H:MM:SS`` from an hour on."""
    whole = max(0, round(seconds))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


class TimeLeft:
    """Time left from the pace seen while watching: the share of iterations done since the first
    poll over the time since then (warm-up iterations included, as in the bar)."""

    def __init__(self) -> None:
        self.first: tuple[float, float] | None = None

    def estimate(self, share: float, now: float) -> float | None:
        if self.first is None:
            self.first = (now, share)
            return None
        started, share_then = self.first
        gained, spent = share - share_then, now - started
        if gained <= 0 or spent <= 0:
            return None
        return (1.0 - share) * spent / gained


def divergence_text(job: Job) -> str:
    warmup = sum(c.warmup_divergences for c in job.chains)
    sampling = sum(c.divergences for c in job.chains)
    return f"divergences warm-up {warmup} sampling {sampling}"


def progress_line(job: Job, elapsed: float | None = None, left: float | None = None) -> str:
    """One line: a bar over all chains' iterations, the state, each phase, the time spent and an
    estimate of the time left, and the divergences of warm-up and sampling apart."""
    share = min(1.0, max(0.0, job.progress))
    filled = round(share * BAR_WIDTH)
    phases = sorted({c.phase for c in job.chains if c.phase})
    # A chain that stopped (at the time limit, say) is done too: it will not move the bar again.
    done = sum(1 for c in job.chains if c.state in TERMINAL_STATES)
    timing = ""
    if elapsed is not None:
        timing = f"  elapsed {clock_text(elapsed)}"
        if not job.finished:
            timing += f" left {'~' + clock_text(left) if left is not None else '?'}"
    return (
        f"[{'#' * filled}{'.' * (BAR_WIDTH - filled)}] {share:4.0%} {job.state:<9} "
        f"chains {done}/{len(job.chains)} done  {'/'.join(phases) or '-':<15}{timing}  "
        f"{divergence_text(job)}"
    )


class ProgressBar:
    """Redraws one terminal line in place; draws nothing at all when `enabled` is false."""

    def __init__(self, stream: TextIO, enabled: bool):
        self.stream = stream
        self.enabled = enabled
        self.drawn = False

    def show(self, line: str) -> None:
        if not self.enabled:
            return
        columns = shutil.get_terminal_size((100, 20)).columns
        self.stream.write("\r" + line[: columns - 1].ljust(columns - 1))
        self.stream.flush()
        self.drawn = True

    def close(self) -> None:
        if self.drawn:
            self.stream.write("\n")
            self.stream.flush()


class Heartbeat:
    """For logs: the progress line, time-stamped, once every `every` seconds and at the end."""

    def __init__(self, stream: TextIO | None, every: float | None):
        self.stream = stream
        self.every = every
        self.last: float | None = None

    def show(self, job: Job, line: str, now: float) -> None:
        if self.stream is None or not self.every:
            return
        if self.last is not None and now - self.last < self.every and not job.finished:
            return
        self.last = now
        stamp = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        self.stream.write(f"{stamp} job {job.id} {line.split('] ', 1)[-1]}\n")
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
    heartbeat: float | None = None,
    heartbeat_stream: TextIO | None = None,
) -> Job:
    """Poll GET /v1/jobs/{id} every `interval` seconds until the job succeeds, fails or is
    cancelled, and return it. `progress=None` shows a bar only when `stream` (default stdout) is a
    terminal, so logs of a pipeline stay free of carriage returns; when no bar is drawn and
    `heartbeat` is given, a time-stamped progress line goes to `heartbeat_stream` (default
    stderr) every `heartbeat` seconds instead. Raises WaitTimedOut after `timeout` seconds."""
    stream = stream or sys.stdout
    if progress is None:
        progress = stream.isatty()
    bar = ProgressBar(stream, progress)
    beat = Heartbeat(None if progress else (heartbeat_stream or sys.stderr), heartbeat)
    pace = TimeLeft()
    started = clock()
    try:
        while True:
            job = client.job(job_id)
            now = clock()
            line = progress_line(job, now - started, pace.estimate(job.progress, now))
            bar.show(line)
            beat.show(job, line, now)
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
