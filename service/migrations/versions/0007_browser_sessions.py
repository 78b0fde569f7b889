"""browser sessions: a signed-in browser speaks for one API key until it expires or signs out

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-03 07:45:00
"""

import sqlalchemy as sa
from alembic import op

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "browser_sessions",
        sa.Column("token_sha256", sa.String(length=64), nullable=False),
        sa.Column("key_id", sa.String(length=32), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("ended_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["key_id"], ["api_keys.id"]),
        sa.PrimaryKeyConstraint("token_sha256"),
    )
    op.create_index(
        op.f("ix_browser_sessions_key_id"), "browser_sessions", ["key_id"], unique=False
    )


def downgrade() -> None:
    op.drop_index(op.f("ix_browser_sessions_key_id"), table_name="browser_sessions")
    op.drop_table("browser_sessions")
