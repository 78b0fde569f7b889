"""The sweeper: puts chains whose task was lost back on the queue, so no job waits for ever.

The broker is not the source of truth; the store is. A chain task can vanish: its worker died and
the broker's copy went with a restart or a flush, or the message was never delivered at all. The
sweeper looks at the store every few seconds and sends the task again for

- running chains whose lease has expired (their worker stopped renewing it), and
- queued chains that have waited longer than ``requeue_queued_after`` since they were last sent,

and the finishing task again for jobs whose chains have all ended but which were never closed.
Each send is claimed first with a conditional UPDATE of the chain's ``requeued_at``, so any number
of sweepers may run side by side without flooding the queue; a task sent twice is harmless, the
chain's lease drops the extra delivery. Attempts are bounded where the lease is taken
(``give_up_if_exhausted``), so a chain that keeps killing its worker ends as failed.

Run it as its own process: ``drawyard sweeper`` (or ``python -m service.sweeper``). After each
sweep that reached the store it touches DRAWYARD_SWEEPER_HEARTBEAT (when set), and
``drawyard sweeper --check`` says whether that happened recently: a container health check that
fails while the sweeper is stuck or cannot reach the store, not merely while its process is gone.
"""

from __future__ import annotations

import argparse
import logging
import signal
import sys
import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

from sqlalchemy import and_, func, or_, select, update

from service import events
from service.config import Settings
from service.dispatch import RUN_CHAIN, send_finish_task
from service.runtime import Runtime
from service.store.engine import transaction
from service.store.models import TERMINAL_STATES, Chain, Job, utc_now

log = logging.getLogger(__name__)


@dataclass
class SweepReport:
    """What one sweep did: (job id, 0-based chain index) of each chain sent again, jobs finished."""

    expired_leases: list[tuple[str, int]] = field(default_factory=list)
    waiting_too_long: list[tuple[str, int]] = field(default_factory=list)
    finishes_sent: list[str] = field(default_factory=list)

    @property
    def anything(self) -> bool:
        return bool(self.expired_leases or self.waiting_too_long or self.finishes_sent)


def give_up_if_exhausted(session: Any, chain: Chain, now: datetime, max_attempts: int) -> bool:
    """End a chain as failed when its lease expired after its last allowed attempt.

    Called where a lease is taken (service/chain_work.py), inside that transaction. True when
    this call ended the chain; the caller then closes the job the usual way.
    """
    if chain.state != "running" or chain.lease_expires_at is None:
        return False
    if chain.lease_expires_at >= now or chain.attempts < max_attempts:
        return False
    reason = (
        f"the chain was started {chain.attempts} times and each time its worker stopped without "
        f"finishing it (at most {max_attempts} attempts; DRAWYARD_MAX_ATTEMPTS); the chain may "
        "be crashing its worker, e.g. by running out of memory"
    )
    ended = session.execute(
        update(Chain)
        .where(
            Chain.id == chain.id,
            Chain.state == "running",
            Chain.lease_token == chain.lease_token,
        )
        .values(state="failed", error=reason, finished_at=now, updated_at=now)
        .execution_options(synchronize_session=False)
    ).rowcount
    if ended:
        events.record(
            session,
            chain.job_id,
            "chain_state",
            "failed",
            chain.chain_index,
            {"error": reason, "attempts": chain.attempts},
        )
    return bool(ended)


def _expired_lease(now: datetime, again_after: timedelta) -> Any:
    # Not already sent again since the lease ran out, unless that send was itself long ago (the
    # broker may have lost it too).
    return and_(
        Chain.state == "running",
        Chain.lease_expires_at < now,
        or_(
            Chain.requeued_at.is_(None),
            Chain.requeued_at < Chain.lease_expires_at,
            Chain.requeued_at < now - again_after,
        ),
    )


def _waiting_too_long(now: datetime, again_after: timedelta) -> Any:
    return and_(
        Chain.state == "queued",
        func.coalesce(Chain.requeued_at, Chain.updated_at) < now - again_after,
    )


def _claim_and_send(runtime: Runtime, condition: Any, found: list[tuple[str, int]]) -> None:
    """Send the chain task again for each chain matching ``condition`` that this sweeper claims."""
    settings = runtime.settings
    not_cancelled = select(Job.id).where(Job.cancel_requested_at.is_(None))
    with runtime.sessions() as session:
        rows = session.execute(
            select(Chain.id, Chain.job_id, Chain.chain_index).where(
                condition, Chain.job_id.in_(not_cancelled)
            )
        ).all()
    for chain_id, job_id, chain_index in rows:
        now = utc_now()
        with transaction(runtime.sessions) as session:
            claimed = session.execute(
                update(Chain)
                .where(Chain.id == chain_id, condition)
                .values(requeued_at=now, requeues=Chain.requeues + 1)
                .execution_options(synchronize_session=False)
            ).rowcount
            if claimed:
                events.record(session, job_id, "chain_requeued", None, chain_index)
        if not claimed:
            continue
        try:
            runtime.celery.send_task(
                RUN_CHAIN, args=[job_id, chain_index], queue=settings.queue, retry=True
            )
        except Exception:
            # The broker is down: forget the claim so the next sweep tries again.
            log.exception("could not requeue chain %s of job %s", chain_index + 1, job_id)
            with transaction(runtime.sessions) as session:
                session.execute(
                    update(Chain)
                    .where(Chain.id == chain_id)
                    .values(requeued_at=None, requeues=Chain.requeues - 1)
                    .execution_options(synchronize_session=False)
                )
            raise
        found.append((job_id, chain_index))
        log.warning("requeued chain %s of job %s", chain_index + 1, job_id)


def _unfinished_jobs(runtime: Runtime, now: datetime, again_after: timedelta) -> list[str]:
    """Jobs whose chains have all ended but that are still open, past the grace period."""
    open_chain = select(Chain.job_id).where(Chain.state.not_in(TERMINAL_STATES))
    with runtime.sessions() as session:
        return list(
            session.scalars(
                select(Job.id).where(
                    Job.state.not_in(TERMINAL_STATES),
                    Job.id.not_in(open_chain),
                    or_(
                        Job.finish_enqueued_at.is_(None),
                        Job.finish_enqueued_at < now - again_after,
                    ),
                )
            ).all()
        )


def _resend_finishes(runtime: Runtime, report: SweepReport) -> None:
    settings = runtime.settings
    now = utc_now()
    again_after = timedelta(seconds=settings.requeue_queued_after)
    for job_id in _unfinished_jobs(runtime, now, again_after):
        with transaction(runtime.sessions) as session:
            # Claimed like a chain: one sweeper sends it; finishing is safe to run twice anyway.
            claimed = session.execute(
                update(Job)
                .where(
                    Job.id == job_id,
                    Job.state.not_in(TERMINAL_STATES),
                    or_(
                        Job.finish_enqueued_at.is_(None),
                        Job.finish_enqueued_at < now - again_after,
                    ),
                )
                .values(finish_enqueued_at=now)
                .execution_options(synchronize_session=False)
            ).rowcount
        if claimed:
            send_finish_task(runtime.celery, settings.closing_queue, job_id)
            report.finishes_sent.append(job_id)


def sweep(runtime: Runtime) -> SweepReport:
    """One pass over the store; safe to run in several processes at once."""
    settings = runtime.settings
    report = SweepReport()
    now = utc_now()
    again_after = timedelta(seconds=settings.requeue_queued_after)
    _claim_and_send(runtime, _expired_lease(now, again_after), report.expired_leases)
    _claim_and_send(runtime, _waiting_too_long(now, again_after), report.waiting_too_long)
    _resend_finishes(runtime, report)
    return report


def run_sweeper(runtime: Runtime, stop: threading.Event) -> None:
    """Sweep every ``sweep_interval`` seconds until ``stop`` is set; a failed sweep is retried."""
    interval = runtime.settings.sweep_interval
    log.info("sweeper started: every %.1f s", interval)
    while not stop.is_set():
        try:
            report = sweep(runtime)
            if report.anything:
                log.warning("sweep: %s", report)
            beat(runtime.settings)
        except Exception:  # the store or the broker is away for a moment; look again later
            log.exception("sweep failed")
        stop.wait(interval)
    log.info("sweeper stopped")


def beat(settings: Settings) -> None:
    if settings.sweeper_heartbeat:
        path = Path(settings.sweeper_heartbeat)
        path.parent.mkdir(parents=True, exist_ok=True)
        path.touch()


def healthy(settings: Settings, now: float | None = None) -> bool:
    """Whether the last good sweep was within three intervals (a missed sweep is not yet ill)."""
    if not settings.sweeper_heartbeat:
        return False
    try:
        last = Path(settings.sweeper_heartbeat).stat().st_mtime
    except OSError:
        return False
    age = (time.time() if now is None else now) - last
    return age <= 3 * settings.sweep_interval + 5.0


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="drawyard sweeper",
        description="Requeue chains whose worker died or whose task the broker lost.",
    )
    parser.add_argument("--once", action="store_true", help="sweep once and exit")
    parser.add_argument("--check", action="store_true",
                        help="exit 0 if a sweep reached the store recently (DRAWYARD_SWEEPER_"
                             "HEARTBEAT), else 1; for health checks")
    args = parser.parse_args(argv)
    from service.config import load_settings
    from service.runtime import build_runtime
    from service.structured_logs import configure_logging

    settings = load_settings()
    if args.check:
        ok = healthy(settings)
        print("sweeper healthy" if ok else "no recent sweep", file=sys.stdout if ok else sys.stderr)
        return 0 if ok else 1
    configure_logging(settings)
    runtime = build_runtime(settings)
    try:
        if args.once:
            print(sweep(runtime))
            return 0
        stop = threading.Event()
        signal.signal(signal.SIGTERM, lambda *_: stop.set())
        signal.signal(signal.SIGINT, lambda *_: stop.set())
        run_sweeper(runtime, stop)
    finally:
        runtime.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
