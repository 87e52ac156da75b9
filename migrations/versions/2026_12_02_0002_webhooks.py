"""Webhooks: targets, the outbox of events, deliveries and their attempts.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

_BIGINT_PK = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "webhook_targets",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("url", sa.Text(), nullable=False),
        sa.Column("description", sa.Text(), nullable=False),
        sa.Column("model_name", sa.String(64), nullable=True),
        sa.Column("event_kinds", sa.JSON(), nullable=False),
        sa.Column("secret", sa.String(100), nullable=False),
        sa.Column("consecutive_failures", sa.Integer(), nullable=False),
        sa.Column("failing_since", _instant(), nullable=True),
        sa.Column("last_success_at", _instant(), nullable=True),
        sa.Column("created_at", _instant(), nullable=False),
        sa.Column("updated_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_webhook_targets")),
    )
    op.create_table(
        "outbox_events",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("kind", sa.String(64), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=True),
        sa.Column("body", sa.Text(), nullable=False),
        sa.Column("created_at", _instant(), nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id"], ["models.id"], name=op.f("fk_outbox_events_model_id_models"), ondelete="SET NULL"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outbox_events")),
    )
    op.create_table(
        "webhook_deliveries",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("message_id", sa.String(40), nullable=False),
        sa.Column("event_id", _BIGINT_PK, nullable=False),
        sa.Column("target_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(16), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("next_attempt_at", _instant(), nullable=True),
        sa.Column("claim_token", sa.String(40), nullable=True),
        sa.Column("claimed_until", _instant(), nullable=True),
        sa.Column("created_at", _instant(), nullable=False),
        sa.Column("finished_at", _instant(), nullable=True),
        sa.ForeignKeyConstraint(
            ["event_id"],
            ["outbox_events.id"],
            name=op.f("fk_webhook_deliveries_event_id_outbox_events"),
            ondelete="CASCADE",
        ),
        sa.ForeignKeyConstraint(
            ["target_id"],
            ["webhook_targets.id"],
            name=op.f("fk_webhook_deliveries_target_id_webhook_targets"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_webhook_deliveries")),
        sa.UniqueConstraint("message_id", name=op.f("uq_webhook_deliveries_message_id")),
    )
    op.create_index(
        op.f("ix_webhook_deliveries_state_next_attempt_at"),
        "webhook_deliveries",
        ["state", "next_attempt_at"],
    )
    op.create_index(
        op.f("ix_webhook_deliveries_target_id_id"), "webhook_deliveries", ["target_id", "id"]
    )
    op.create_table(
        "webhook_attempts",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("delivery_id", _BIGINT_PK, nullable=False),
        sa.Column("number", sa.Integer(), nullable=False),
        sa.Column("attempted_at", _instant(), nullable=False),
        sa.Column("status_code", sa.Integer(), nullable=True),
        sa.Column("latency_ms", sa.Double(), nullable=False),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("next_attempt_at", _instant(), nullable=True),
        sa.ForeignKeyConstraint(
            ["delivery_id"],
            ["webhook_deliveries.id"],
            name=op.f("fk_webhook_attempts_delivery_id_webhook_deliveries"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_webhook_attempts")),
    )
    op.create_index(
        op.f("ix_webhook_attempts_delivery_id_number"), "webhook_attempts", ["delivery_id", "number"]
    )


def downgrade() -> None:
    op.drop_table("webhook_attempts")
    op.drop_table("webhook_deliveries")
    op.drop_table("outbox_events")
    op.drop_table("webhook_targets")
