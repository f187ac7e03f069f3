"""access, idempotency, webhooks, history

API keys, idempotency records, webhooks and their delivery outbox, the pipeline names of each
run (filled in for existing runs from their specs), a retry time on jobs, and indexes for
history queries.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "idempotency_records",
        sa.Column("caller_id", sa.String(length=40), nullable=False),
        sa.Column("key", sa.String(length=255), nullable=False),
        sa.Column("method", sa.String(length=8), nullable=False),
        sa.Column("path", sa.String(length=500), nullable=False),
        sa.Column("request_sha256", sa.String(length=64), nullable=False),
        sa.Column("status_code", sa.Integer(), nullable=False),
        sa.Column("media_type", sa.String(length=100), nullable=False),
        sa.Column("body", sa.Text(), nullable=False),
        sa.Column("location", sa.String(length=500), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("caller_id", "key"),
    )
    with op.batch_alter_table("idempotency_records", schema=None) as batch_op:
        batch_op.create_index("ix_idempotency_records_created", ["created_at"], unique=False)

    op.create_table(
        "api_keys",
        sa.Column("id", sa.String(length=40), nullable=False),
        sa.Column("token_sha256", sa.String(length=64), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("study_id", sa.String(length=40), nullable=True),
        sa.Column("label", sa.String(length=200), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["study_id"], ["studies.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("token_sha256"),
    )
    op.create_table(
        "webhooks",
        sa.Column("id", sa.String(length=40), nullable=False),
        sa.Column("study_id", sa.String(length=40), nullable=False),
        sa.Column("url", sa.String(length=2000), nullable=False),
        sa.Column("secret", sa.String(length=100), nullable=False),
        sa.Column("events", sa.JSON(), nullable=False),
        sa.Column("description", sa.String(length=200), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["study_id"], ["studies.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("webhooks", schema=None) as batch_op:
        batch_op.create_index("ix_webhooks_study", ["study_id"], unique=False)

    op.create_table(
        "run_pipelines",
        sa.Column("run_id", sa.String(length=40), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.ForeignKeyConstraint(["run_id"], ["runs.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("run_id", "position"),
    )
    with op.batch_alter_table("run_pipelines", schema=None) as batch_op:
        batch_op.create_index("ix_run_pipelines_name", ["name", "run_id"], unique=False)
    _fill_run_pipelines()

    op.create_table(
        "webhook_deliveries",
        sa.Column("id", sa.String(length=40), nullable=False),
        sa.Column("webhook_id", sa.String(length=40), nullable=False),
        sa.Column("event_id", sa.String(length=40), nullable=False),
        sa.Column("event_type", sa.String(length=40), nullable=False),
        sa.Column("run_id", sa.String(length=40), nullable=False),
        sa.Column("payload", sa.Text(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("next_attempt_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("lease_expires_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("last_status_code", sa.Integer(), nullable=True),
        sa.Column("last_error", sa.Text(), nullable=True),
        sa.Column("log", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("delivered_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["webhook_id"], ["webhooks.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("webhook_deliveries", schema=None) as batch_op:
        batch_op.create_index("ix_webhook_deliveries_due", ["status", "next_attempt_at"], unique=False)
        batch_op.create_index("ix_webhook_deliveries_webhook", ["webhook_id", "created_at"], unique=False)

    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("available_at", sa.DateTime(timezone=True), nullable=True))

    with op.batch_alter_table("runs", schema=None) as batch_op:
        batch_op.create_index("ix_runs_created", ["created_at", "id"], unique=False)
        batch_op.create_index("ix_runs_finished", ["finished_at"], unique=False)


def _fill_run_pipelines() -> None:
    runs = sa.table("runs", sa.column("id", sa.String), sa.column("spec", sa.JSON))
    run_pipelines = sa.table(
        "run_pipelines", sa.column("run_id", sa.String), sa.column("position", sa.Integer), sa.column("name", sa.String)
    )
    rows = [
        {"run_id": run_id, "position": position, "name": pipeline["name"]}
        for run_id, spec in op.get_bind().execute(sa.select(runs.c.id, runs.c.spec))
        for position, pipeline in enumerate((spec or {}).get("pipelines", []))
    ]
    if rows:
        op.bulk_insert(run_pipelines, rows)


def downgrade() -> None:
    with op.batch_alter_table("runs", schema=None) as batch_op:
        batch_op.drop_index("ix_runs_finished")
        batch_op.drop_index("ix_runs_created")

    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.drop_column("available_at")

    with op.batch_alter_table("webhook_deliveries", schema=None) as batch_op:
        batch_op.drop_index("ix_webhook_deliveries_webhook")
        batch_op.drop_index("ix_webhook_deliveries_due")

    op.drop_table("webhook_deliveries")
    with op.batch_alter_table("run_pipelines", schema=None) as batch_op:
        batch_op.drop_index("ix_run_pipelines_name")

    op.drop_table("run_pipelines")
    with op.batch_alter_table("webhooks", schema=None) as batch_op:
        batch_op.drop_index("ix_webhooks_study")

    op.drop_table("webhooks")
    op.drop_table("api_keys")
    with op.batch_alter_table("idempotency_records", schema=None) as batch_op:
        batch_op.drop_index("ix_idempotency_records_created")

    op.drop_table("idempotency_records")
