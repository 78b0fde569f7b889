"""One chain's life inside a worker: lease, run through the engine, progress, results, hand-off.

A chain row is run by whoever holds its lease. The lease is taken with a conditional UPDATE that
only one process can win; its token fences every later write, so a redelivered duplicate of the
chain task (the broker's visibility timeout, a lost acknowledgement) is detected and dropped, and a
worker that lost its lease cannot overwrite the new holder's results. A background thread writes
progress at a bounded rate, renews the lease, and reads the job's cancel flag, so the engine's
callbacks never wait on the database.
"""

from __future__ import annotations

import hashlib
import logging
import os
import socket
import threading
import time
import uuid
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

import numpy as np
from sqlalchemy import and_, delete, exists, func, or_, select, update

from service import crash_drill, evaluation_counts, events, metrics
from service.dispatch import send_finish_task
from service.runtime import Runtime
from service.store.arrays import ENCODING, encode_array
from service.store.engine import transaction
from service.store.large_values import write_chain_array_data
from service.store.models import (
    TERMINAL_STATES,
    Chain,
    ChainArray,
    CheckpointBlock,
    Job,
    utc_now,
)
from service.versions import software_versions

log = logging.getLogger(__name__)


@dataclass
class Lease:
    chain_id: int
    job_id: str
    chain_index: int
    token: str
    attempt: int
    checkpoint: bytes | None
    body: dict[str, Any]
    # the spec's and the data's fingerprints from submission: the compiled model's cache key
    model_key: str | None = None
    # the records blocks of an incremental checkpoint, in order (none for a version-1 snapshot)
    blocks: list[bytes] = field(default_factory=list)


def take_lease(
    runtime: Runtime, job_id: str, chain_index: int, count_duplicate: bool = True
) -> Lease | None:
    """The chain's lease for this process, or None when another delivery holds or finished it.

    ``count_duplicate`` is False for a delivery that only re-checks a lease it already found held.
    """
    settings = runtime.settings
    token = uuid.uuid4().hex
    now = utc_now()
    host, pid = socket.gethostname(), os.getpid()
    with transaction(runtime.sessions) as session:
        job = session.scalars(select(Job).where(Job.id == job_id)).one_or_none()
        if job is None:
            log.warning("chain task for unknown job %s dropped", job_id)
            return None
        if job.cancel_requested_at is not None:
            _cancel_queued_chain(session, job_id, chain_index)
            return None
        takeable = or_(
            Chain.state == "queued",
            and_(
                Chain.state == "running",
                Chain.lease_expires_at < now,
                Chain.attempts < settings.max_attempts,
            ),
        )
        taken = session.execute(
            update(Chain)
            .where(Chain.job_id == job_id, Chain.chain_index == chain_index, takeable)
            .values(
                state="running",
                lease_token=token,
                lease_expires_at=now + timedelta(seconds=settings.lease_seconds),
                attempts=Chain.attempts + 1,
                worker_host=host,
                worker_pid=pid,
                worker_software=software_versions(),
                started_at=func.coalesce(Chain.started_at, now),
                updated_at=now,
            )
            .execution_options(synchronize_session=False)
        ).rowcount
        chain = session.scalars(
            select(Chain).where(Chain.job_id == job_id, Chain.chain_index == chain_index)
        ).one()
        if taken != 1:
            from service.sweeper import give_up_if_exhausted

            if give_up_if_exhausted(session, chain, now, settings.max_attempts):
                return None
            if chain.attempts > 0 and count_duplicate:
                session.execute(
                    update(Chain)
                    .where(Chain.id == chain.id)
                    .values(duplicate_deliveries=Chain.duplicate_deliveries + 1)
                    .execution_options(synchronize_session=False)
                )
                events.record(
                    session,
                    job_id,
                    "duplicate_delivery_dropped",
                    chain.state,
                    chain_index,
                    {"worker_host": host, "worker_pid": pid},
                )
            return None
        detail = {"attempt": chain.attempts, "worker_host": host, "worker_pid": pid}
        checkpoint, blocks = chain.checkpoint, _checkpoint_blocks(session, chain.id)
        if blocks is None:  # a corrupt block: start over, which gives the same draws
            checkpoint, blocks = None, []
        if checkpoint is not None:
            detail["resumed_from_iteration"] = chain.checkpoint_iteration
        events.record(session, job_id, "chain_state", "running", chain_index, detail)
        started = session.execute(
            update(Job)
            .where(Job.id == job_id, Job.state == "queued")
            .values(state="running", started_at=now)
            .execution_options(synchronize_session=False)
        ).rowcount
        if started == 1:
            events.record(session, job_id, "job_state", "running")
        return Lease(
            chain.id, job_id, chain_index, token, chain.attempts, checkpoint, job.body,
            # the reparametrisation setting changes the compiled model's coordinates
            f"{job.spec_sha256}:{job.data_sha256}:"
            f"{(job.body.get('sampler') or {}).get('reparametrise', True)}",
            blocks,
        )


def _checkpoint_blocks(session: Any, chain_id: int) -> list[bytes] | None:
    """The chain's stored records blocks in order, each checked against its SHA-256; None when
    one is corrupt."""
    rows = session.execute(
        select(CheckpointBlock.data, CheckpointBlock.sha256)
        .where(CheckpointBlock.chain_id == chain_id)
        .order_by(CheckpointBlock.start_iteration)
    ).all()
    blocks = [bytes(row.data) for row in rows]
    if any(hashlib.sha256(b).hexdigest() != r.sha256 for b, r in zip(blocks, rows, strict=True)):
        log.warning("a checkpoint block of chain row %s is corrupt; it starts over", chain_id)
        return None
    return blocks


def _cancel_queued_chain(session: Any, job_id: str, chain_index: int) -> None:
    done = session.execute(
        update(Chain)
        .where(Chain.job_id == job_id, Chain.chain_index == chain_index, Chain.state == "queued")
        .values(state="cancelled", finished_at=utc_now(), updated_at=utc_now())
        .execution_options(synchronize_session=False)
    ).rowcount
    if done:
        events.record(session, job_id, "chain_state", "cancelled", chain_index)


@dataclass
class ChainMonitor:
    """Holds the latest progress from the engine and, on its own thread, writes it out."""

    runtime: Runtime
    lease: Lease
    phase: str | None = None
    iteration: int = 0
    # Apart by phase, so neither count ever falls when a chain leaves warm-up; None until the
    # engine reports warm-up here (a chain resumed in sampling keeps the stored warm-up count).
    divergences: int = 0
    warmup_divergences: int | None = None
    stop_reason: str | None = None
    # Incremental checkpoints not yet written: the newest state, and every records block since
    # the last write (all must reach the store, in order, with that state).
    _state: tuple[bytes, int] | None = None
    _blocks: list[Any] = field(default_factory=list)
    _pending_lock: threading.Lock = field(default_factory=threading.Lock)
    _written_checkpoint_iteration: int = -1
    _stop_flag: threading.Event = field(default_factory=threading.Event)
    _closing: threading.Event = field(default_factory=threading.Event)
    _thread: threading.Thread | None = None
    _started: float = field(default_factory=time.monotonic)
    # The running chain's incremental_checkpoint(), for checkpoints by time as well as by
    # iterations.
    snapshot_source: Any = None
    _last_checkpoint: float = field(default_factory=time.monotonic)

    # --- the engine's callbacks: cheap, no I/O -----------------------------------------------
    def progress(self, phase: str, iteration: int, divergences: int) -> None:
        self.phase, self.iteration = phase, int(iteration)
        if phase == "warmup":
            self.warmup_divergences = int(divergences)
        else:
            self.divergences = int(divergences)
        crash_drill.maybe_kill(self.lease.chain_index, self.iteration)
        every = self.runtime.settings.checkpoint_seconds
        if (
            self.snapshot_source is not None
            and every > 0
            and time.monotonic() - self._last_checkpoint >= every
        ):
            # Called between iterations, where a snapshot resumes exactly, like the engine's own.
            self.checkpoint(self.snapshot_source())

    def divergence_counts(self) -> dict[str, int]:
        counts = {"divergences": self.divergences}
        if self.warmup_divergences is not None:
            counts["warmup_divergences"] = self.warmup_divergences
        return counts

    def should_stop(self) -> bool:
        return self._stop_flag.is_set()

    def checkpoint(self, checkpoint: Any) -> None:
        """Keep an engine Checkpoint (worker.samplers.chain) for the writer thread."""
        with self._pending_lock:
            self._blocks.append(checkpoint)
            self._state = (checkpoint.state, int(checkpoint.iteration))
        self._last_checkpoint = time.monotonic()

    # --- the writer thread ---------------------------------------------------------------------
    def start(self) -> ChainMonitor:
        self._thread = threading.Thread(target=self._loop, name="chain-progress", daemon=True)
        self._thread.start()
        return self

    def close(self) -> None:
        self._closing.set()
        if self._thread is not None:
            self._thread.join(timeout=30)

    def _stop(self, reason: str) -> None:
        if self.stop_reason is None:
            self.stop_reason = reason
        self._stop_flag.set()

    def _loop(self) -> None:
        interval = self.runtime.settings.progress_interval
        while not self._closing.wait(interval):
            try:
                self.flush()
            except Exception:  # a database hiccup must not kill the chain; the lease has slack
                log.exception("progress write for job %s failed", self.lease.job_id)

    def flush(self) -> None:
        settings = self.runtime.settings
        now = utc_now()
        values: dict[str, Any] = {
            "phase": self.phase,
            "iteration": self.iteration,
            **self.divergence_counts(),
            "updated_at": now,
            "lease_expires_at": now + timedelta(seconds=settings.lease_seconds),
        }
        with self._pending_lock:
            pending, blocks = self._state, list(self._blocks)
        if pending is not None and pending[1] != self._written_checkpoint_iteration:
            values.update(checkpoint=pending[0], checkpoint_iteration=pending[1], checkpoint_at=now)
        else:
            pending = None
        with transaction(self.runtime.sessions) as session:
            # The fenced UPDATE comes first and the blocks only if it held: a worker that lost its
            # lease appends nothing, and the lease cannot change hands until this commits (the
            # taker's UPDATE of the same row waits for it, then sees the renewed lease).
            held = session.execute(
                update(Chain)
                .where(Chain.id == self.lease.chain_id, Chain.lease_token == self.lease.token)
                .values(**values)
                .execution_options(synchronize_session=False)
            ).rowcount
            if held and pending is not None and blocks:
                _append_blocks(session, self.lease.chain_id, blocks)
            cancelled = session.scalar(
                select(Job.cancel_requested_at).where(Job.id == self.lease.job_id)
            )
        if pending is not None and held:
            self._written_checkpoint_iteration = pending[1]
            with self._pending_lock:
                del self._blocks[: len(blocks)]
        if not held:
            self._stop("lease_lost")
        elif cancelled is not None:
            self._stop("cancelled")
        elif time.monotonic() - self._started > settings.chain_time_limit:
            self._stop("time_limit")


def _append_blocks(session: Any, chain_id: int, blocks: list[Any]) -> None:
    """Store records blocks that continue the chain's stored ones. Blocks from their first
    iteration on are replaced: what a chain that started over (its checkpoint unusable) or a
    written-off earlier holder left there no longer fits this run's state."""
    session.execute(
        delete(CheckpointBlock).where(
            CheckpointBlock.chain_id == chain_id,
            CheckpointBlock.start_iteration >= blocks[0].start,
        )
    )
    session.add_all(
        CheckpointBlock(
            chain_id=chain_id,
            start_iteration=int(block.start),
            stop_iteration=int(block.iteration),
            sha256=hashlib.sha256(block.records).hexdigest(),
            data=block.records,
        )
        for block in blocks
    )


@dataclass(frozen=True)
class ChainOutcome:
    """What a delivery of a chain task did; ``recheck_after`` asks for a later look (seconds)."""

    status: str
    recheck_after: float | None = None


def lease_recheck_seconds(runtime: Runtime, job_id: str, chain_index: int) -> float | None:
    """Seconds until a running chain's lease runs out, or None when the chain has ended.

    A delivery that finds the chain held elsewhere looks again after this long: if the holder died
    (a worker killed after its message was requeued or redelivered), the lease lapses and the
    chain is taken over from its checkpoint instead of being left without any message.
    """
    with runtime.sessions() as session:
        row = session.execute(
            select(Chain.state, Chain.lease_expires_at).where(
                Chain.job_id == job_id, Chain.chain_index == chain_index
            )
        ).one_or_none()
    if row is None or row.state != "running" or row.lease_expires_at is None:
        return None
    return max(0.0, (row.lease_expires_at - utc_now()).total_seconds()) + 1.0


def run_chain(
    runtime: Runtime, job_id: str, chain_index: int, recheck: bool = False
) -> ChainOutcome:
    """Run one chain of a job if this delivery wins its lease; says what happened."""

    lease = take_lease(runtime, job_id, chain_index, count_duplicate=not recheck)
    if lease is None:
        wait = lease_recheck_seconds(runtime, job_id, chain_index)
        if wait is not None:
            return ChainOutcome("held elsewhere", wait)
        _resend_finish_if_due(runtime, job_id)
        return ChainOutcome("dropped")
    monitor = ChainMonitor(runtime, lease).start()
    model = None
    try:
        from worker.runner import compile_body

        model = runtime.models.borrow(lease.model_key, lambda: compile_body(lease.body))
        result = _run(runtime, lease, model, monitor)
    except Exception as error:
        monitor.close()
        runtime.models.give_back(lease.model_key, model)
        log.exception("chain %s of job %s failed", chain_index + 1, job_id)
        outcome = "failed"
        ended = end_chain(runtime, lease, "failed", f"{type(error).__name__}: {error}", monitor)
    else:
        monitor.close()
        runtime.models.give_back(lease.model_key, model)
        if result.completed:
            outcome = "succeeded"
            ended = store_result(runtime, lease, result, monitor)
        elif monitor.stop_reason == "lease_lost":
            return ChainOutcome("lease lost")
        elif monitor.stop_reason == "cancelled":
            outcome = "cancelled"
            ended = end_chain(runtime, lease, "cancelled", None, monitor)
        elif monitor.stop_reason == "time_limit":
            # Stopped cleanly between iterations: what it drew so far is kept, marked partial.
            outcome = "timed_out"
            stop = TimeLimitStop.of(result, runtime.settings.chain_time_limit)
            ended = store_result(runtime, lease, result, monitor, stop)
        else:
            outcome = "failed"
            reason = "the sampler stopped before the last draw"
            ended = end_chain(runtime, lease, "failed", reason, monitor)
    if ended and claim_finish(runtime, job_id):
        send_finish_task(runtime.celery, runtime.settings.closing_queue, job_id)
    return ChainOutcome(outcome if ended else "lease lost")


def _run(runtime: Runtime, lease: Lease, model: Any, monitor: ChainMonitor) -> Any:
    """The chain's result. Only the result leaves: the chain itself, whose unconstrained draws are
    as large as the reported ones, is garbage before the result is encoded and stored."""
    chain_run = _start_or_resume(lease, model)
    if chain_run.snapshot is None:  # an approximation run restarts; it takes no checkpoints
        return chain_run.run(progress=monitor.progress, should_stop=monitor.should_stop)
    monitor.snapshot_source = chain_run.incremental_checkpoint
    try:
        return chain_run.run(
            progress=monitor.progress,
            should_stop=monitor.should_stop,
            checkpoint=monitor.checkpoint,
            checkpoint_every=runtime.settings.checkpoint_every,
            incremental=True,
        )
    finally:
        monitor.snapshot_source = None


def _start_or_resume(lease: Lease, model: Any = None) -> Any:
    """The chain from its checkpoint, or from the start when the checkpoint cannot be used.

    Starting over costs time but not correctness: a chain's draws depend only on the body and its
    seed, so a fresh start ends with the same draws as a resume would.
    """
    from worker import runner

    if lease.checkpoint is not None:
        blocks, lease.blocks = lease.blocks, []  # let them go once the chain holds their records
        try:
            return runner.resume_chain(
                lease.body, lease.chain_index, lease.checkpoint, model, blocks
            )
        except Exception as error:  # any unreadable or mismatched snapshot: start over
            log.warning(
                "checkpoint of chain %s of job %s unusable (%s); starting it over",
                lease.chain_index + 1,
                lease.job_id,
                error,
            )
    return runner.start_chain(lease.body, lease.chain_index, model)


def end_chain(
    runtime: Runtime,
    lease: Lease,
    state: str,
    error: str | None,
    monitor: ChainMonitor | None = None,
) -> bool:
    """Record a chain's end without results; False when the lease was lost meanwhile."""
    now = utc_now()
    last: dict[str, Any] = {}
    if monitor is not None and monitor.phase is not None:
        # Where the chain stopped, not where the last periodic write happened to catch it.
        last = {
            "phase": monitor.phase,
            "iteration": monitor.iteration,
            **monitor.divergence_counts(),
        }
    with transaction(runtime.sessions) as session:
        done = session.execute(
            update(Chain)
            .where(
                Chain.id == lease.chain_id,
                Chain.lease_token == lease.token,
                Chain.state == "running",
            )
            .values(state=state, error=error, finished_at=now, updated_at=now, **last)
            .execution_options(synchronize_session=False)
        ).rowcount
        if done:
            detail = {"error": error} if error else None
            events.record(session, lease.job_id, "chain_state", state, lease.chain_index, detail)
    if done:
        metrics.chain_ran(state, None, now, None)
    return bool(done)


@dataclass(frozen=True)
class TimeLimitStop:
    """Where a chain stood when its wall-time limit stopped it."""

    limit_seconds: int
    iteration: int  # iterations finished, warm-up included
    warmup_iterations: int  # warm-up iterations finished
    draws: int  # sampling-phase draws kept
    divergences: int  # in sampling
    warmup_divergences: int

    @classmethod
    def of(cls, result: Any, limit_seconds: int) -> TimeLimitStop:
        # The engine keeps one row of statistics per finished iteration in each phase, so their
        # lengths say exactly where it stopped (progress reports are only every 1% or so).
        warmup = max((len(v) for v in dict(result.warmup_stats).values()), default=0)
        draws = int(np.asarray(result.values).shape[0])
        counts = [
            int(np.count_nonzero(stats.get("divergent", ())))
            for stats in (dict(result.stats), dict(result.warmup_stats))
        ]
        return cls(int(limit_seconds), warmup + draws, warmup, draws, *counts)

    @property
    def phase(self) -> str:
        return "sampling" if self.draws else "warmup"

    def reason(self, iterations_total: int) -> str:
        where = (
            f"in sampling, with {self.draws} draws kept"
            if self.draws
            else "during warm-up, before any draw"
        )
        return (
            f"the chain reached its wall-time limit of {self.limit_seconds} s at iteration "
            f"{self.iteration} of {iterations_total} ({where})"
        )

    def detail(self, iterations_total: int) -> dict[str, Any]:
        return {
            "time_limit_seconds": self.limit_seconds,
            "iteration": self.iteration,
            "iterations_total": iterations_total,
            "draws": self.draws,
        }


def store_result(
    runtime: Runtime,
    lease: Lease,
    result: Any,
    monitor: ChainMonitor,
    stopped: TimeLimitStop | None = None,
) -> bool:
    """Store a chain's draws and statistics, only while this delivery holds the lease.

    ``stopped`` is set for a chain its wall-time limit stopped: its draws so far are stored the
    same way and the chain ends ``timed_out`` at the iteration it reached. The result's draws are
    let go once encoded (``values`` keeps their width, no rows): a long chain's draws, their
    compressed form and the database driver's copy of that are then never held all at once.
    """
    draws = encode_array(np.asarray(result.values, dtype=np.float64))
    result.values = np.empty((0, *np.shape(result.values)[1:]))  # not a view: that would keep them
    stats = {name: encode_array(np.asarray(v)) for name, v in dict(result.stats).items()}
    now = utc_now()
    state = "succeeded" if stopped is None else "timed_out"
    ending: dict[str, Any] = {
        "iteration": Chain.iterations_total,
        "phase": monitor.phase,
        **monitor.divergence_counts(),
    }
    detail: dict[str, Any] = {"draws_sha256": draws.sha256}
    if stopped is not None:
        total = _iterations_total(runtime, lease)
        ending = {
            "iteration": stopped.iteration,
            "phase": stopped.phase,
            "divergences": stopped.divergences,
            "warmup_divergences": stopped.warmup_divergences,
            "error": stopped.reason(total),
        }
        detail.update(stopped.detail(total))
    with transaction(runtime.sessions) as session:
        done = session.execute(
            update(Chain)
            .where(
                Chain.id == lease.chain_id,
                Chain.lease_token == lease.token,
                Chain.state == "running",
            )
            .values(
                state=state,
                finished_at=now,
                updated_at=now,
                **ending,
                adapted=_json_ready(result.adapted),
                checkpoint=None,
                # a result without counts stores NULL: "not counted"
                **evaluation_counts.row_values(getattr(result, "evaluations", None)),
            )
            .execution_options(synchronize_session=False)
        ).rowcount
        if not done:
            return False
        started_at = session.scalar(select(Chain.started_at).where(Chain.id == lease.chain_id))
        session.execute(delete(CheckpointBlock).where(CheckpointBlock.chain_id == lease.chain_id))
        session.execute(delete(ChainArray).where(ChainArray.chain_id == lease.chain_id))
        integers = getattr(result, "integer_names", frozenset())
        types = ["int64" if name in integers else "float64" for name in result.names]
        rows = [("draws", "draws", draws, list(result.names))]
        rows += [("stat", name, encoded, None) for name, encoded in stats.items()]
        stored = [
            ChainArray(
                chain_id=lease.chain_id,
                kind=kind,
                name=name,
                columns=columns,
                column_types=types if kind == "draws" else None,
                encoding=ENCODING,
                dtype=encoded.dtype,
                shape=encoded.shape,
                sha256=encoded.sha256,
                # the draws go in pieces once the row exists (service/store/large_values.py)
                data=b"" if kind == "draws" else encoded.data,
            )
            for kind, name, encoded, columns in rows
        ]
        session.add_all(stored)
        session.flush()
        write_chain_array_data(session, stored[0].id, draws.data)
        events.record(
            session,
            lease.job_id,
            "chain_state",
            state,
            lease.chain_index,
            detail,
        )
    metrics.chain_ran(state, started_at, now, getattr(result, "evaluations", None))
    return True


def _iterations_total(runtime: Runtime, lease: Lease) -> int:
    with runtime.sessions() as session:
        return int(
            session.scalar(select(Chain.iterations_total).where(Chain.id == lease.chain_id)) or 0
        )


def _json_ready(value: Any) -> Any:
    """Arrays and numpy scalars in the engine's adapted settings, as plain JSON values."""
    if isinstance(value, dict):
        return {str(k): _json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(v) for v in value]
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def claim_finish(runtime: Runtime, job_id: str) -> bool:
    """True for exactly one caller once every chain of the job has ended (an atomic UPDATE)."""
    unfinished = exists().where(Chain.job_id == job_id, Chain.state.not_in(TERMINAL_STATES))
    with transaction(runtime.sessions) as session:
        claimed = session.execute(
            update(Job)
            .where(Job.id == job_id, Job.finish_enqueued_at.is_(None), ~unfinished)
            .values(finish_enqueued_at=utc_now())
            .execution_options(synchronize_session=False)
        ).rowcount
    return claimed == 1


def _resend_finish_if_due(runtime: Runtime, job_id: str) -> None:
    """After a dropped duplicate: if every chain ended but the job did not, queue the finish again.

    Covers a worker that died between ending the last chain and queueing the finishing task; the
    finishing task is safe to run more than once.
    """
    if claim_finish(runtime, job_id):
        send_finish_task(runtime.celery, runtime.settings.closing_queue, job_id)
        return
    with runtime.sessions() as session:
        job_state = session.scalar(select(Job.state).where(Job.id == job_id))
        pending = session.scalar(
            select(func.count())
            .select_from(Chain)
            .where(Chain.job_id == job_id, Chain.state.not_in(TERMINAL_STATES))
        )
    if job_state is not None and job_state not in TERMINAL_STATES and pending == 0:
        send_finish_task(runtime.celery, runtime.settings.closing_queue, job_id)
