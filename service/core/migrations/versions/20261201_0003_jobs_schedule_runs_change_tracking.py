"""jobs, schedule runs, change tracking

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "schedule_runs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("schedule_name", sa.String(length=64), nullable=False),
        sa.Column("slot", sa.DateTime(timezone=True), nullable=False),
        sa.Column("job_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["job_id"], ["jobs.id"], name=op.f("fk_schedule_runs_job_id_jobs"), ondelete="SET NULL"
        ),
        sa.ForeignKeyConstraint(
            ["schedule_name"],
            ["schedules.name"],
            name=op.f("fk_schedule_runs_schedule_name_schedules"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_schedule_runs")),
        sa.UniqueConstraint("schedule_name", "slot", name=op.f("uq_schedule_runs_schedule_name")),
    )
    with op.batch_alter_table("schedule_runs", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_schedule_runs_schedule_name"), ["schedule_name"], unique=False
        )

    with op.batch_alter_table("fits", schema=None) as batch_op:
        batch_op.add_column(sa.Column("holdout_wape", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("own_price_estimate", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("job_id", sa.Integer(), nullable=True))
        batch_op.create_foreign_key(
            batch_op.f("fk_fits_job_id_jobs"), "jobs", ["job_id"], ["id"], ondelete="SET NULL"
        )

    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("message", sa.String(length=500), nullable=True))
        batch_op.add_column(sa.Column("claimed_by", sa.String(length=120), nullable=True))
        batch_op.add_column(sa.Column("schedule_name", sa.String(length=64), nullable=True))
        batch_op.add_column(sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=True))

    with op.batch_alter_table("products", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("history_changed_at", sa.DateTime(timezone=True), nullable=True)
        )


def downgrade() -> None:
    with op.batch_alter_table("products", schema=None) as batch_op:
        batch_op.drop_column("history_changed_at")

    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.drop_column("heartbeat_at")
        batch_op.drop_column("schedule_name")
        batch_op.drop_column("claimed_by")
        batch_op.drop_column("message")

    with op.batch_alter_table("fits", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("fk_fits_job_id_jobs"), type_="foreignkey")
        batch_op.drop_column("job_id")
        batch_op.drop_column("own_price_estimate")
        batch_op.drop_column("holdout_wape")

    with op.batch_alter_table("schedule_runs", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_schedule_runs_schedule_name"))

    op.drop_table("schedule_runs")
