"""epoch-set sources: recordings epoched by the worker, file formats

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("epoch_sets", schema=None) as batch_op:
        batch_op.add_column(sa.Column("source", sa.String(length=16), server_default="upload", nullable=False))
        batch_op.add_column(sa.Column("file_format", sa.String(length=8), server_default="npz", nullable=False))
        batch_op.add_column(sa.Column("file_sha256", sa.String(length=64), nullable=True))
        batch_op.add_column(sa.Column("events_sha256", sa.String(length=64), nullable=True))
        batch_op.add_column(sa.Column("epoching", sa.JSON(), nullable=True))
        batch_op.add_column(sa.Column("channels", sa.JSON(), nullable=True))
        batch_op.add_column(sa.Column("events_found", sa.JSON(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("epoch_sets", schema=None) as batch_op:
        for column in ("events_found", "channels", "epoching", "events_sha256", "file_sha256", "file_format", "source"):
            batch_op.drop_column(column)
