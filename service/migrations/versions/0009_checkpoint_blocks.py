"""checkpoint blocks: a running chain's draws are checkpointed incrementally

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-03 13:00:00

- checkpoint_blocks: one row per incremental checkpoint of a running chain, the records (draws
  and statistics) of the iterations since the one before; ``chains.checkpoint`` then holds the
  state without records (snapshot version 2). A checkpoint stored before this revision is a
  version-1 snapshot holding every record so far, and resumes alone, as it did.
- chain_arrays on SQLite: rebuilt (once) with ``data`` as its last column, as the tables of 0001
  had it before 0008 added ``column_types`` after it. Stored draws are written and read in pieces
  through SQLite's blob I/O (service/store/large_values.py), and SQLite writes a ``zeroblob``
  without materialising it only when it is the record's last field: otherwise storing a long
  chain's draws costs a transient copy of them in memory. The rebuild copies every stored array
  once; nothing refers to chain_arrays, so no row elsewhere is touched. PostgreSQL is unchanged.
- Downgrade: the code before this revision cannot read version-2 snapshots, so a chain whose
  checkpoint has blocks loses its checkpoint and starts over when it runs again (its draws depend
  only on the body and the seed, so they come out the same); then the table goes.
"""

import sqlalchemy as sa
from alembic import op

revision = "0009"
down_revision = "0008"
branch_labels = None
depends_on = None

CHAINS = sa.table(
    "chains",
    sa.column("id", sa.Integer),
    sa.column("checkpoint", sa.LargeBinary),
    sa.column("checkpoint_iteration", sa.Integer),
    sa.column("checkpoint_at", sa.DateTime(timezone=True)),
)
BLOCKS = sa.table("checkpoint_blocks", sa.column("chain_id", sa.Integer))


def upgrade() -> None:
    op.create_table(
        "checkpoint_blocks",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("chain_id", sa.Integer(), nullable=False),
        sa.Column("start_iteration", sa.Integer(), nullable=False),
        sa.Column("stop_iteration", sa.Integer(), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("data", sa.LargeBinary(), nullable=False),
        sa.ForeignKeyConstraint(["chain_id"], ["chains.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("chain_id", "start_iteration", name="uq_checkpoint_blocks_start"),
    )
    if op.get_bind().dialect.name == "sqlite":
        with op.batch_alter_table(
            "chain_arrays", recreate="always", partial_reordering=[("column_types", "data")]
        ):
            pass


def downgrade() -> None:
    op.get_bind().execute(
        CHAINS.update()
        .where(CHAINS.c.id.in_(sa.select(BLOCKS.c.chain_id)))
        .values(checkpoint=None, checkpoint_iteration=None, checkpoint_at=None)
    )
    op.drop_table("checkpoint_blocks")
