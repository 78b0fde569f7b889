"""model registry versions; jobs record their model reference, reuse source and warm start

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-01 21:30:00
"""

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "model_versions",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        # "" in open mode: NULLs would not collide in the unique constraints below.
        sa.Column("tenant", sa.String(length=64), nullable=False),
        sa.Column("name", sa.String(length=64), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("spec_sha256", sa.String(length=64), nullable=False),
        sa.Column("spec", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=64), nullable=True),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("tenant", "name", "version", name="uq_model_versions_number"),
        sa.UniqueConstraint("tenant", "name", "spec_sha256", name="uq_model_versions_content"),
    )
    with op.batch_alter_table("jobs") as batch:
        batch.add_column(sa.Column("run_sha256", sa.String(length=64), nullable=True))
        batch.add_column(sa.Column("reused_from", sa.String(length=32), nullable=True))
        batch.add_column(sa.Column("warm_start_from", sa.String(length=32), nullable=True))
        batch.add_column(sa.Column("model_name", sa.String(length=64), nullable=True))
        batch.add_column(sa.Column("model_version", sa.Integer(), nullable=True))
        batch.create_index("ix_jobs_run_sha256", ["run_sha256"])


def downgrade() -> None:
    with op.batch_alter_table("jobs") as batch:
        batch.drop_index("ix_jobs_run_sha256")
        batch.drop_column("model_version")
        batch.drop_column("model_name")
        batch.drop_column("warm_start_from")
        batch.drop_column("reused_from")
        batch.drop_column("run_sha256")
    op.drop_table("model_versions")
