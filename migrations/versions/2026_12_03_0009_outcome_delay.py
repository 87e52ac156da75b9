"""Outcomes may say when their event happened; models keep their measured outcome delay; alarms
keep restatements.

``occurred_at`` (outcomes and their history) is optional and NULL for every
existing row: when the event happened, as opposed to ``observed_at``, when it
was reported. With a horizon an event that happened after it counts as a 0.
``models.outcome_delay`` holds the delay distribution the alarms job measures
(NULL until it first runs); ``alarms.restatements`` lists how later outcomes changed
a window alarm's period (NULL: none). Nothing has to be filled in.

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0009"
down_revision = "0008"
branch_labels = None
depends_on = None


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    with op.batch_alter_table("outcomes") as batch:
        batch.add_column(sa.Column("occurred_at", _instant(), nullable=True))
    with op.batch_alter_table("outcome_revisions") as batch:
        batch.add_column(sa.Column("occurred_at", _instant(), nullable=True))
    with op.batch_alter_table("models") as batch:
        batch.add_column(sa.Column("outcome_delay", sa.JSON(), nullable=True))
    with op.batch_alter_table("alarms") as batch:
        batch.add_column(sa.Column("restatements", sa.JSON(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("alarms") as batch:
        batch.drop_column("restatements")
    with op.batch_alter_table("models") as batch:
        batch.drop_column("outcome_delay")
    with op.batch_alter_table("outcome_revisions") as batch:
        batch.drop_column("occurred_at")
    with op.batch_alter_table("outcomes") as batch:
        batch.drop_column("occurred_at")
