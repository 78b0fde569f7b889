"""chains: when the sweeper last put a chain back on the queue, and how often

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01 21:05:00
"""

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("chains") as batch:
        batch.add_column(sa.Column("requeued_at", sa.DateTime(timezone=True), nullable=True))
        batch.add_column(
            sa.Column("requeues", sa.Integer(), nullable=False, server_default=sa.text("0"))
        )


def downgrade() -> None:
    with op.batch_alter_table("chains") as batch:
        batch.drop_column("requeues")
        batch.drop_column("requeued_at")
