"""digest scheme and body as sent per job; warm-up divergences apart; draws column types

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-03 08:45:00

- jobs.digest_scheme: the canonical JSON the job's digests were taken over. From this revision on
  RFC 8785 ("rfc8785"); jobs stored before keep their digests, under the scheme they were made
  with ("sorted-keys-v1"), so each stays verifiable against what is stored.
- jobs.request_body: the submission exactly as sent, which request_sha256 covers; NULL for jobs
  stored before (their body was not kept apart from the stored one).
- model_versions.spec_sha256: recomputed under RFC 8785, since the registry compares a new
  registration's digest, always taken under the current scheme, with the stored ones.
- chains.warmup_divergences: warm-up's divergences, counted apart from sampling's; NULL for
  chains stored before (their one count was that of the phase they ended in).
- chain_arrays.column_types: each draws column's natural type in downloads; NULL before (all
  float64, as they were downloaded then).
"""

from __future__ import annotations

import hashlib
import json

import sqlalchemy as sa
from alembic import op

revision = "0008"
down_revision = "0007"
branch_labels = None
depends_on = None

JOBS = sa.table(
    "jobs", sa.column("id", sa.String), sa.column("body", sa.JSON),
    sa.column("settings", sa.JSON), sa.column("request_body", sa.JSON),
    sa.column("digest_scheme", sa.String), sa.column("request_sha256", sa.String),
    sa.column("spec_sha256", sa.String), sa.column("data_sha256", sa.String),
    sa.column("run_sha256", sa.String), sa.column("warm_start_from", sa.String),
    sa.column("api_software", sa.JSON),
)  # fmt: skip
MODEL_VERSIONS = sa.table(
    "model_versions", sa.column("id", sa.Integer), sa.column("spec", sa.JSON),
    sa.column("spec_sha256", sa.String),
)  # fmt: skip


def _sorted_keys_digest(value: object) -> str:
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _rehash_registry(digest) -> None:
    connection = op.get_bind()
    for row in connection.execute(sa.select(MODEL_VERSIONS.c.id, MODEL_VERSIONS.c.spec)).all():
        connection.execute(
            MODEL_VERSIONS.update()
            .where(MODEL_VERSIONS.c.id == row.id)
            .values(spec_sha256=digest(row.spec))
        )


# recreate="never": SQLite (3.35 on) adds and drops columns in place; a batch copy of jobs would
# drop the old table, and ON DELETE CASCADE would take every chain with it.


def upgrade() -> None:
    from service.canonical import jcs_json

    with op.batch_alter_table("jobs", recreate="never") as batch:
        batch.add_column(
            sa.Column("digest_scheme", sa.String(32), nullable=False,
                      server_default="sorted-keys-v1")
        )  # fmt: skip
        batch.add_column(sa.Column("request_body", sa.JSON(), nullable=True))
    with op.batch_alter_table("chains", recreate="never") as batch:
        batch.add_column(sa.Column("warmup_divergences", sa.Integer(), nullable=True))
    with op.batch_alter_table("chain_arrays", recreate="never") as batch:
        batch.add_column(sa.Column("column_types", sa.JSON(), nullable=True))
    _rehash_registry(lambda spec: hashlib.sha256(jcs_json(spec)).hexdigest())


def _redigest_newer_jobs() -> None:
    """Jobs made under RFC 8785 get the earlier scheme's digests, which the code before this
    revision computes: spec, data, the request (from the body as sent) and the run fingerprint
    (as service/reuse.py wrote it at 0006)."""
    from service.reuse import verdict_thresholds
    from worker.runner import summary_interval

    connection = op.get_bind()
    rows = connection.execute(sa.select(JOBS).where(JOBS.c.digest_scheme == "rfc8785")).all()
    for row in rows:
        body = row.body or {}
        spec_sha256 = _sorted_keys_digest(body.get("model"))
        data_sha256 = _sorted_keys_digest(body.get("data") or {})
        run = {
            "model": spec_sha256, "data": data_sha256, "settings": row.settings,
            "summary_interval": summary_interval(body),
            "checks": verdict_thresholds(body.get("checks")),
            "warm_start_from": row.warm_start_from, "software": row.api_software,
        }  # fmt: skip
        values = {"spec_sha256": spec_sha256, "data_sha256": data_sha256,
                  "run_sha256": _sorted_keys_digest(run)}  # fmt: skip
        if row.request_body is not None:
            values["request_sha256"] = _sorted_keys_digest(row.request_body)
        connection.execute(JOBS.update().where(JOBS.c.id == row.id).values(**values))


def downgrade() -> None:
    _redigest_newer_jobs()
    _rehash_registry(_sorted_keys_digest)
    with op.batch_alter_table("chain_arrays", recreate="never") as batch:
        batch.drop_column("column_types")
    with op.batch_alter_table("chains", recreate="never") as batch:
        batch.drop_column("warmup_divergences")
    with op.batch_alter_table("jobs", recreate="never") as batch:
        batch.drop_column("request_body")
        batch.drop_column("digest_scheme")
