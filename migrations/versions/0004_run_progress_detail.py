"""multiverse runs: progress detail of runs (units done, total, ETA); locked pipelines of studies

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("runs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("progress_detail", sa.JSON(), nullable=True))
    op.create_table(
        "locked_pipelines",
        sa.Column("study_id", sa.String(length=40), nullable=False),
        sa.Column("pipeline", sa.JSON(), nullable=False),
        sa.Column("scoring", sa.JSON(), nullable=False),
        sa.Column("pipeline_hash", sa.String(length=64), nullable=False),
        sa.Column("source_run", sa.String(length=40), nullable=True),
        sa.Column("locked_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["study_id"], ["studies.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("study_id"),
    )


def downgrade() -> None:
    op.drop_table("locked_pipelines")
    with op.batch_alter_table("runs", schema=None) as batch_op:
        batch_op.drop_column("progress_detail")
