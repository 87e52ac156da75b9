"""Initial schema: models, predictions, outcomes and their revisions, API keys, audit trail.

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def _case_id() -> sa.types.TypeEngine:
    return sa.String(200).with_variant(sa.String(200, collation="C"), "postgresql")


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


_BIGINT_PK = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def upgrade() -> None:
    op.create_table(
        "models",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("name", sa.String(64), nullable=False),
        sa.Column("description", sa.Text(), nullable=False),
        sa.Column("outcome_horizon_days", sa.Integer(), nullable=True),
        sa.Column("outcome_lag_days", sa.Integer(), nullable=False),
        sa.Column("implicit_negatives", sa.Boolean(), nullable=False),
        sa.Column("segment_keys", sa.JSON(), nullable=False),
        sa.Column("reference", sa.JSON(), nullable=True),
        sa.Column("settings_generation", sa.Integer(), nullable=False),
        sa.Column("created_at", _instant(), nullable=False),
        sa.Column("updated_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_models")),
        sa.UniqueConstraint("name", name=op.f("uq_models_name")),
    )
    op.create_table(
        "predictions",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("case_id", _case_id(), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("probability", sa.Double(), nullable=False),
        sa.Column("scored_at", _instant(), nullable=False),
        sa.Column("tags", sa.Text(), nullable=True),
        sa.Column("received_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("model_id", "case_id", "version", name=op.f("pk_predictions")),
    )
    op.create_index(
        op.f("ix_predictions_model_id_version_scored_at"),
        "predictions",
        ["model_id", "version", "scored_at"],
    )
    op.create_table(
        "outcomes",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("case_id", _case_id(), nullable=False),
        sa.Column("label", sa.SmallInteger(), nullable=False),
        sa.Column("observed_at", _instant(), nullable=False),
        sa.Column("received_at", _instant(), nullable=False),
        sa.Column("revision", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("model_id", "case_id", name=op.f("pk_outcomes")),
    )
    op.create_table(
        "outcome_revisions",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("case_id", _case_id(), nullable=False),
        sa.Column("revision", sa.Integer(), nullable=False),
        sa.Column("label", sa.SmallInteger(), nullable=False),
        sa.Column("observed_at", _instant(), nullable=False),
        sa.Column("received_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outcome_revisions")),
    )
    op.create_index(
        op.f("ix_outcome_revisions_model_id_case_id_revision"),
        "outcome_revisions",
        ["model_id", "case_id", "revision"],
        unique=True,
    )
    op.create_table(
        "api_keys",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("key_id", sa.String(32), nullable=False),
        sa.Column("secret_hash", sa.String(64), nullable=False),
        sa.Column("scope", sa.String(16), nullable=False),
        sa.Column("model_name", sa.String(64), nullable=True),
        sa.Column("label", sa.Text(), nullable=False),
        sa.Column("created_at", _instant(), nullable=False),
        sa.Column("revoked_at", _instant(), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_api_keys")),
        sa.UniqueConstraint("key_id", name=op.f("uq_api_keys_key_id")),
    )
    op.create_table(
        "audit_events",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("at", _instant(), nullable=False),
        sa.Column("actor", sa.String(64), nullable=False),
        sa.Column("action", sa.String(64), nullable=False),
        sa.Column("target", sa.String(200), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["models.id"],
            name=op.f("fk_audit_events_model_id_models"),
            ondelete="SET NULL",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_audit_events")),
    )


def downgrade() -> None:
    op.drop_table("audit_events")
    op.drop_table("api_keys")
    op.drop_index(op.f("ix_outcome_revisions_model_id_case_id_revision"), "outcome_revisions")
    op.drop_table("outcome_revisions")
    op.drop_table("outcomes")
    op.drop_index(op.f("ix_predictions_model_id_version_scored_at"), "predictions")
    op.drop_table("predictions")
    op.drop_table("models")
