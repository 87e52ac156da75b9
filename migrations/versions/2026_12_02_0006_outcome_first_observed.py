"""Outcomes keep the observation time of their first label, indexed for the charts.

Without an outcome horizon a case matures when its first outcome was
observed; a correction must not move it. Existing rows take the earliest
``observed_at`` of their label history (or their own when no history exists).

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("outcomes") as batch:
        batch.add_column(sa.Column("first_observed_at", sa.DateTime(timezone=True), nullable=True))
    op.execute(
        "UPDATE outcomes SET first_observed_at = COALESCE(("
        "SELECT MIN(r.observed_at) FROM outcome_revisions r "
        "WHERE r.model_id = outcomes.model_id AND r.case_id = outcomes.case_id), observed_at)"
    )
    with op.batch_alter_table("outcomes") as batch:
        batch.alter_column("first_observed_at", existing_type=sa.DateTime(timezone=True), nullable=False)
    op.create_index(
        op.f("ix_outcomes_model_id_first_observed_at"), "outcomes", ["model_id", "first_observed_at"]
    )


def downgrade() -> None:
    op.drop_index(op.f("ix_outcomes_model_id_first_observed_at"), "outcomes")
    with op.batch_alter_table("outcomes") as batch:
        batch.drop_column("first_observed_at")
