"""Job failures per model: a model that keeps failing a job is retried with backoff, then held back.

One new table; no existing data moves.

Revision ID: 0014
Revises: 0013
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0014"
down_revision = "0013"
branch_labels = None
depends_on = None


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "job_failures",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("job", sa.String(32), nullable=False),
        sa.Column("error_class", sa.String(128), nullable=False),
        sa.Column("error_message", sa.Text(), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("first_seen_at", _instant(), nullable=False),
        sa.Column("last_seen_at", _instant(), nullable=False),
        sa.Column("retry_at", _instant(), nullable=False),
        sa.Column("quarantined_at", _instant(), nullable=True),
        sa.ForeignKeyConstraint(["model_id"], ["models.id"], name=op.f("fk_job_failures_model_id_models"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("model_id", "job", name=op.f("pk_job_failures")),
    )


def downgrade() -> None:
    op.drop_table("job_failures")
