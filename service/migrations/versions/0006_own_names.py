"""stored documents take our own names: specs, settings, warm-start records, summaries, arrays

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03 07:40:00

A data migration only: no table changes. What it rewrites (service/migrations/own_names.py holds
the renames):

- model_versions: the spec, and its SHA-256 recomputed over the rewritten spec's canonical JSON,
  so a registration of the same model under the new names finds the existing version;
- jobs: the stored body (spec, sampler settings, warm-start records), the resolved settings, the
  summary (whose fixed 5%, 50% and 95% quantiles become the median and the 90% central
  interval; the body records that level as summary.interval, 0.9, so a repeat of the submission
  with that level reuses the result), the diagnostics (with their settings, column names and
  adapted records) and the
  verdict (whose failed checks name quantities); spec_sha256 over the rewritten spec,
  run_sha256 over the rewritten settings (with the software recorded at submission, as the
  service computed it then), and
  request_sha256 when it was the digest of the stored body itself (a body whose seed the service
  drew was stored with it, so its request digest cannot be recomputed and is left as it is: it
  matters only to a retry of that very request with its idempotency key);
- chains: the adapted records (warm-start sources) and any snapshot of a chain in flight;
- chain_arrays: per-draw statistic names and the draws' column names.

Digests are recomputed rather than mapped: after the upgrade every stored digest is the digest of
what is stored, which is what reuse, the registry and the audit record check.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

import sqlalchemy as sa
from alembic import op

from service.migrations import own_names as names

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None

# none_as_null: a job without a summary keeps SQL NULL there, not the JSON value null
JSON = sa.JSON(none_as_null=True)
JOBS = sa.table(
    "jobs",
    sa.column("id", sa.String),
    sa.column("body", JSON),
    sa.column("settings", JSON),
    sa.column("summary", JSON),
    sa.column("diagnostics", JSON),
    sa.column("verdict", JSON),
    sa.column("request_sha256", sa.String),
    sa.column("spec_sha256", sa.String),
    sa.column("data_sha256", sa.String),
    sa.column("run_sha256", sa.String),
    sa.column("warm_start_from", sa.String),
    sa.column("api_software", JSON),
)
MODEL_VERSIONS = sa.table(
    "model_versions", sa.column("id", sa.Integer), sa.column("spec", JSON),
    sa.column("spec_sha256", sa.String),
)  # fmt: skip
CHAINS = sa.table(
    "chains", sa.column("id", sa.Integer), sa.column("adapted", JSON),
    sa.column("checkpoint", sa.LargeBinary),
)  # fmt: skip
ARRAYS = sa.table(
    "chain_arrays", sa.column("id", sa.Integer), sa.column("kind", sa.String),
    sa.column("name", sa.String), sa.column("columns", JSON),
)  # fmt: skip


def _digest(value: Any) -> str:
    """SHA-256 of canonical JSON, as service/canonical.py writes it."""
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _run_digest(row: Any, body: dict, settings: Any, spec_sha256: str, forward: bool) -> str:
    """The job's run fingerprint (service/reuse.py) over the rewritten spec and settings; from
    this revision on it also holds the summary's interval level (the earlier one was 0.9)."""
    from service.reuse import verdict_thresholds

    fingerprint = {
        "model": spec_sha256,
        "data": row.data_sha256,
        "settings": settings,
        "checks": verdict_thresholds(body.get("checks")),
        "warm_start_from": row.warm_start_from,
        "software": row.api_software,
    }
    if forward:
        fingerprint["summary_interval"] = float(body["summary"]["interval"])
    return _digest(fingerprint)


def _rewrite(forward: bool) -> None:
    connection = op.get_bind()
    for row in connection.execute(sa.select(MODEL_VERSIONS)).fetchall():
        spec = names.spec(row.spec, forward)
        connection.execute(
            MODEL_VERSIONS.update()
            .where(MODEL_VERSIONS.c.id == row.id)
            .values(spec=spec, spec_sha256=_digest(spec))
        )
    job_ids = [r.id for r in connection.execute(sa.select(JOBS.c.id)).fetchall()]
    for job_id in job_ids:  # one job at a time: a body may hold megabytes of data
        row = connection.execute(sa.select(JOBS).where(JOBS.c.id == job_id)).one()
        body = names.body(row.body, forward)
        settings = names.settings(row.settings, forward)
        values: dict[str, Any] = {
            "body": body,
            "settings": settings,
            "summary": names.quantity_records(row.summary, forward),
            "diagnostics": names.diagnostics(row.diagnostics, forward),
            "verdict": names.verdict(row.verdict, forward),
        }
        if isinstance(body, dict) and "model" in body:
            values["spec_sha256"] = _digest(body["model"])
            if row.run_sha256 is not None:
                values["run_sha256"] = _run_digest(
                    row, body, settings, values["spec_sha256"], forward
                )
        if isinstance(row.body, dict) and row.request_sha256 == _digest(row.body):
            values["request_sha256"] = _digest(body)
        connection.execute(JOBS.update().where(JOBS.c.id == job_id).values(**values))
    for row in connection.execute(sa.select(CHAINS.c.id, CHAINS.c.adapted)).fetchall():
        if row.adapted is not None:
            connection.execute(
                CHAINS.update().where(CHAINS.c.id == row.id)
                .values(adapted=names.adapted(row.adapted, forward))
            )  # fmt: skip
    in_flight = sa.select(CHAINS.c.id).where(CHAINS.c.checkpoint.is_not(None))
    for (chain_id,) in connection.execute(in_flight).fetchall():
        blob = connection.execute(
            sa.select(CHAINS.c.checkpoint).where(CHAINS.c.id == chain_id)
        ).scalar_one()
        connection.execute(
            CHAINS.update().where(CHAINS.c.id == chain_id)
            .values(checkpoint=names.snapshot(bytes(blob), forward))
        )  # fmt: skip
    for old, new in names.STATISTICS.items():
        before, after = (old, new) if forward else (new, old)
        connection.execute(
            ARRAYS.update()
            .where(ARRAYS.c.kind == "stat", ARRAYS.c.name == before)
            .values(name=after)
        )
    draws = sa.select(ARRAYS.c.id, ARRAYS.c.columns).where(ARRAYS.c.kind == "draws")
    for row in connection.execute(draws).fetchall():
        columns = [names.column(c, forward) for c in row.columns or []]
        if columns != (row.columns or []):
            connection.execute(
                ARRAYS.update().where(ARRAYS.c.id == row.id).values(columns=columns)
            )


def upgrade() -> None:
    _rewrite(forward=True)


def downgrade() -> None:
    # What the earlier names cannot say stays as it is (an ordered vector with a lower bound
    # other than 0 had no earlier form).
    _rewrite(forward=False)
