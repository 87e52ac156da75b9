"""Retention: per-model days of raw rows, the sealed boundary, its record, and the indexes it reads.

``models.retention_days`` (None keeps raw rows for ever, as before) and ``models.pruned_before``
(None: nothing removed yet) are new nullable columns, so existing models keep everything.
``retention_seals`` records each advance of ``pruned_before`` with the settings generation the
sealed summaries were computed under. Retention removes rows by model and age, so predictions
get an index on (model_id, scored_at) and audit events one on ``at``.

Revision ID: 0016
Revises: 0013
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0016"
down_revision = "0015"
branch_labels = None
depends_on = None

_BIGINT_PK = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    with op.batch_alter_table("models") as batch:
        batch.add_column(sa.Column("retention_days", sa.Integer(), nullable=True))
        batch.add_column(sa.Column("pruned_before", _instant(), nullable=True))
    op.create_index(op.f("ix_predictions_model_id_scored_at"), "predictions", ["model_id", "scored_at"])
    op.create_index(op.f("ix_audit_events_at"), "audit_events", ["at"])
    op.create_table(
        "retention_seals",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("sealed_from", _instant(), nullable=True),
        sa.Column("sealed_before", _instant(), nullable=False),
        sa.Column("settings_generation", sa.Integer(), nullable=False),
        sa.Column("sealed_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_retention_seals")),
    )
    op.create_index(
        op.f("ix_retention_seals_model_id_sealed_before"), "retention_seals", ["model_id", "sealed_before"]
    )


def downgrade() -> None:
    op.drop_index(op.f("ix_retention_seals_model_id_sealed_before"), table_name="retention_seals")
    op.drop_table("retention_seals")
    op.drop_index(op.f("ix_audit_events_at"), table_name="audit_events")
    op.drop_index(op.f("ix_predictions_model_id_scored_at"), table_name="predictions")
    with op.batch_alter_table("models") as batch:
        batch.drop_column("pruned_before")
        batch.drop_column("retention_days")
