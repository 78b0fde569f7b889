"""API keys, and the tenant that owns each job

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01 21:05:00.000000
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "api_keys",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("tenant", sa.String(length=64), nullable=False),
        sa.Column("scopes", sa.JSON(), nullable=False),
        sa.Column("secret_sha256", sa.String(length=64), nullable=False),
        sa.Column("label", sa.String(length=255), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index(op.f("ix_api_keys_tenant"), "api_keys", ["tenant"], unique=False)
    # Jobs stored before keys existed (or in open mode) have no tenant; no tenant's key sees them.
    with op.batch_alter_table("jobs") as batch:
        batch.add_column(sa.Column("tenant", sa.String(length=64), nullable=True))
        batch.create_index("ix_jobs_tenant_state", ["tenant", "state"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("jobs") as batch:
        batch.drop_index("ix_jobs_tenant_state")
        batch.drop_column("tenant")
    op.drop_index(op.f("ix_api_keys_tenant"), table_name="api_keys")
    op.drop_table("api_keys")
