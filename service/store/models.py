"""Tables of the results store: jobs, their chains, stored arrays, running chains' checkpoint
blocks, labels, the event log and the model registry."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    DateTime,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column
from sqlalchemy.types import TypeDecorator

# "timed_out": stopped at the wall-time limit (DRAWYARD_CHAIN_TIME_LIMIT), draws so far kept.
JOB_STATES = ("queued", "running", "succeeded", "failed", "cancelled", "timed_out")
TERMINAL_STATES = ("succeeded", "failed", "cancelled", "timed_out")


class UtcDateTime(TypeDecorator):
    """Timezone-aware UTC datetimes on every backend (SQLite keeps no zone, so we add it back)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetimes are not stored; use datetime.now(UTC)")
        return value.astimezone(UTC)

    def process_result_value(self, value: datetime | None, dialect: Any) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


def utc_now() -> datetime:
    return datetime.now(UTC)


class Base(DeclarativeBase):
    pass


class Job(Base):
    __tablename__ = "jobs"
    __table_args__ = (Index("ix_jobs_tenant_state", "tenant", "state"),)

    # seq orders jobs for cursor pagination; id is the public name.
    seq: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    id: Mapped[str] = mapped_column(String(32), unique=True)
    state: Mapped[str] = mapped_column(String(16), index=True)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime)
    started_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    finished_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    cancel_requested_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    # Set once, atomically, by whichever chain finishes last: it enqueues the finishing task.
    finish_enqueued_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    chain_count: Mapped[int] = mapped_column(Integer)
    seed: Mapped[int] = mapped_column(BigInteger)
    # The submission as stored: the request body with the seed filled in when it was missing.
    # Deferred: it holds the data, which can be megabytes, and the status endpoint never needs it.
    body: Mapped[dict[str, Any]] = mapped_column(JSON, deferred=True)
    settings: Mapped[dict[str, Any]] = mapped_column(JSON)
    labels: Mapped[dict[str, str]] = mapped_column(JSON)
    # The body exactly as sent (migration 0008; NULL before), which request_sha256 covers, so
    # a reviewer can fetch it back (GET /v1/jobs/{id}/request). Deferred for the same reason.
    request_body: Mapped[Any] = mapped_column(JSON, deferred=True)
    request_sha256: Mapped[str] = mapped_column(String(64))
    spec_sha256: Mapped[str] = mapped_column(String(64))
    data_sha256: Mapped[str] = mapped_column(String(64))
    # The canonical JSON the digests above were taken over (service/canonical.py SCHEMES).
    digest_scheme: Mapped[str] = mapped_column(String(32), default="rfc8785")
    idempotency_key: Mapped[str | None] = mapped_column(String(255), unique=True)
    submitted_by: Mapped[str | None] = mapped_column(String(64))
    # The tenant of the API key that submitted the job; None in open mode (no keys configured).
    tenant: Mapped[str | None] = mapped_column(String(64))
    api_software: Mapped[dict[str, str]] = mapped_column(JSON)
    finish_software: Mapped[dict[str, str] | None] = mapped_column(JSON)
    summary: Mapped[list[Any] | None] = mapped_column(JSON)
    diagnostics: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    verdict: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    error: Mapped[str | None] = mapped_column(Text)
    # The registry, result reuse and warm starts (migration 0004): the registered model a
    # submission named by model_ref, the fingerprint of everything that fixes the draws
    # (service/reuse.py), the job whose result this one copied, and the job it started from.
    model_name: Mapped[str | None] = mapped_column(String(64))
    model_version: Mapped[int | None] = mapped_column(Integer)
    run_sha256: Mapped[str | None] = mapped_column(String(64), index=True)
    reused_from: Mapped[str | None] = mapped_column(String(32))
    warm_start_from: Mapped[str | None] = mapped_column(String(32))


class ModelVersion(Base):
    """One immutable registration of a model spec under a name (service/registry.py)."""

    __tablename__ = "model_versions"
    __table_args__ = (
        UniqueConstraint("tenant", "name", "version", name="uq_model_versions_number"),
        UniqueConstraint("tenant", "name", "spec_sha256", name="uq_model_versions_content"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    # "" in open mode: NULLs never collide in a unique constraint, so numbering needs a value.
    tenant: Mapped[str] = mapped_column(String(64))
    name: Mapped[str] = mapped_column(String(64))
    version: Mapped[int] = mapped_column(Integer)
    spec_sha256: Mapped[str] = mapped_column(String(64))
    spec: Mapped[dict[str, Any]] = mapped_column(JSON)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime)
    created_by: Mapped[str | None] = mapped_column(String(64))


class JobLabel(Base):
    """Labels in rows of their own so that list filters are indexed lookups on any backend."""

    __tablename__ = "job_labels"
    __table_args__ = (Index("ix_job_labels_key_value", "key", "value"),)

    job_id: Mapped[str] = mapped_column(
        String(32), ForeignKey("jobs.id", ondelete="CASCADE"), primary_key=True
    )
    key: Mapped[str] = mapped_column(String(255), primary_key=True)
    value: Mapped[str] = mapped_column(String(1024))


class Chain(Base):
    __tablename__ = "chains"
    __table_args__ = (UniqueConstraint("job_id", "chain_index", name="uq_chains_job_index"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    job_id: Mapped[str] = mapped_column(String(32), ForeignKey("jobs.id", ondelete="CASCADE"))
    chain_index: Mapped[int] = mapped_column(Integer)  # 0-based here; 1-based in the API
    state: Mapped[str] = mapped_column(String(16))
    # Fencing token: only the holder of the current token may write progress or results.
    lease_token: Mapped[str | None] = mapped_column(String(32))
    lease_expires_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    # Set by the sweeper (service/sweeper.py) each time it sends a lost chain's task again.
    requeued_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    requeues: Mapped[int] = mapped_column(Integer, default=0, server_default="0")
    duplicate_deliveries: Mapped[int] = mapped_column(Integer, default=0)
    worker_host: Mapped[str | None] = mapped_column(String(255))
    worker_pid: Mapped[int | None] = mapped_column(Integer)
    worker_software: Mapped[dict[str, str] | None] = mapped_column(JSON)
    phase: Mapped[str | None] = mapped_column(String(32))
    iteration: Mapped[int] = mapped_column(Integer, default=0)
    iterations_total: Mapped[int] = mapped_column(Integer)
    # In sampling; warm-up's apart (migration 0008), NULL for chains stored before it.
    divergences: Mapped[int] = mapped_column(Integer, default=0)
    warmup_divergences: Mapped[int | None] = mapped_column(Integer)
    # Evaluations of the model the worker counted, by phase (migration 0005; service/
    # evaluation_counts.py): with gradient, and of the log density alone (random-walk Metropolis).
    # NULL for chains stored before 0005 and for reused chains, which no worker ran.
    warmup_gradient_evaluations: Mapped[int | None] = mapped_column(BigInteger)
    sampling_gradient_evaluations: Mapped[int | None] = mapped_column(BigInteger)
    warmup_log_density_evaluations: Mapped[int | None] = mapped_column(BigInteger)
    sampling_log_density_evaluations: Mapped[int | None] = mapped_column(BigInteger)
    started_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    finished_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    updated_at: Mapped[datetime] = mapped_column(UtcDateTime)
    # Deferred: the latest snapshot can be large and only a delivery that takes the lease reads it.
    checkpoint: Mapped[bytes | None] = mapped_column(LargeBinary, deferred=True)
    checkpoint_iteration: Mapped[int | None] = mapped_column(Integer)
    checkpoint_at: Mapped[datetime | None] = mapped_column(UtcDateTime)
    adapted: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    error: Mapped[str | None] = mapped_column(Text)


class CheckpointBlock(Base):
    """The records (draws and statistics) of a stretch of a running chain's iterations, written by
    one incremental checkpoint (migration 0009; worker.samplers.chain.Checkpoint). With the
    chain's ``checkpoint`` (its state without records) the blocks from iteration 0 resume it
    exactly; each checkpoint adds one block, so writing them is linear in the chain's length.
    Written in the transaction that moves ``checkpoint`` on, under the lease; deleted with the
    chain's results."""

    __tablename__ = "checkpoint_blocks"
    __table_args__ = (
        UniqueConstraint("chain_id", "start_iteration", name="uq_checkpoint_blocks_start"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    chain_id: Mapped[int] = mapped_column(Integer, ForeignKey("chains.id", ondelete="CASCADE"))
    start_iteration: Mapped[int] = mapped_column(Integer)
    stop_iteration: Mapped[int] = mapped_column(Integer)
    sha256: Mapped[str] = mapped_column(String(64))
    data: Mapped[bytes] = mapped_column(LargeBinary)


class ChainArray(Base):
    """One stored array of a chain: its draws (kind "draws") or one sampler statistic ("stat")."""

    __tablename__ = "chain_arrays"
    __table_args__ = (UniqueConstraint("chain_id", "kind", "name", name="uq_chain_arrays"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    chain_id: Mapped[int] = mapped_column(Integer, ForeignKey("chains.id", ondelete="CASCADE"))
    kind: Mapped[str] = mapped_column(String(16))
    name: Mapped[str] = mapped_column(String(255))
    # Column names of a draws array (the quantities), in order.
    columns: Mapped[list[str] | None] = mapped_column(JSON)
    # Each column's natural type in downloads ("float64", "int64"), beside ``columns``
    # (migration 0008; NULL before: all float64).
    column_types: Mapped[list[str] | None] = mapped_column(JSON)
    encoding: Mapped[str] = mapped_column(String(16))
    dtype: Mapped[str] = mapped_column(String(16))
    shape: Mapped[list[int]] = mapped_column(JSON)
    sha256: Mapped[str] = mapped_column(String(64))
    data: Mapped[bytes] = mapped_column(LargeBinary)


class Event(Base):
    """Append-only log of what happened to a job; rows are inserted, never updated."""

    __tablename__ = "events"
    __table_args__ = (Index("ix_events_job", "job_id", "id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    job_id: Mapped[str] = mapped_column(String(32), ForeignKey("jobs.id", ondelete="CASCADE"))
    at: Mapped[datetime] = mapped_column(UtcDateTime)
    kind: Mapped[str] = mapped_column(String(32))
    chain_index: Mapped[int | None] = mapped_column(Integer)
    state: Mapped[str | None] = mapped_column(String(16))
    detail: Mapped[dict[str, Any] | None] = mapped_column(JSON)
