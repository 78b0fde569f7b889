"""chains: evaluations of the model the worker counted, by phase (with gradient; log density alone)

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-01 23:50:00
"""

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None

COLUMNS = (
    "warmup_gradient_evaluations",
    "sampling_gradient_evaluations",
    "warmup_log_density_evaluations",
    "sampling_log_density_evaluations",
)


def upgrade() -> None:
    # Nullable without a default: chains stored before this revision were not counted, and NULL
    # says so (the metrics fall back to their stored leapfrog steps).
    with op.batch_alter_table("chains") as batch:
        for name in COLUMNS:
            batch.add_column(sa.Column(name, sa.BigInteger(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("chains") as batch:
        for name in reversed(COLUMNS):
            batch.drop_column(name)
