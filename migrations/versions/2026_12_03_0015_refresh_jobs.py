"""Refresh jobs: POST /v1/refresh answers with a job that runs in the background.

One new table; no existing data moves. ``running_slot`` is unique and NULL once a
job ends, so at most one job runs at a time across every process on the database.

Revision ID: 0015
Revises: 0014
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0015"
down_revision = "0014"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "refresh_jobs",
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("state", sa.String(16), nullable=False),
        sa.Column("running_slot", sa.String(16), nullable=True),
        sa.Column("worker", sa.String(64), nullable=False),
        sa.Column("requested_by", sa.String(64), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("progress", sa.JSON(), nullable=False),
        sa.Column("result", sa.JSON(), nullable=True),
        sa.Column("errors", sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_refresh_jobs")),
        sa.UniqueConstraint("running_slot", name=op.f("uq_refresh_jobs_running_slot")),
    )
    op.create_index(op.f("ix_refresh_jobs_started_at"), "refresh_jobs", ["started_at"])


def downgrade() -> None:
    op.drop_index(op.f("ix_refresh_jobs_started_at"), table_name="refresh_jobs")
    op.drop_table("refresh_jobs")
