"""figures of a run's report, drawn once and kept

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "run_figures",
        sa.Column("run_id", sa.String(length=40), nullable=False),
        sa.Column("name", sa.String(length=300), nullable=False),
        sa.Column("format", sa.String(length=8), nullable=False),
        sa.Column("renderer", sa.String(length=64), nullable=False),
        sa.Column("content", sa.LargeBinary(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("run_id", "name", "format", "renderer"),
    )


def downgrade() -> None:
    op.drop_table("run_figures")
