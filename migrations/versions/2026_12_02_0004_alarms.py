"""Alarms: rules, chart streams, alarms, per-model alarm state.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None

_BIGINT_PK = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def _case_id() -> sa.String:
    return sa.String(200).with_variant(sa.String(200, collation="C"), "postgresql")


def upgrade() -> None:
    op.create_table(
        "alarm_rules",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(64), nullable=False),
        sa.Column("kind", sa.String(32), nullable=False),
        sa.Column("params", sa.JSON(), nullable=False),
        sa.Column("enabled", sa.Boolean(), nullable=False),
        sa.Column("is_default", sa.Boolean(), nullable=False),
        sa.Column("evaluated_through", _instant(), nullable=True),
        sa.Column("created_at", _instant(), nullable=False),
        sa.Column("updated_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_alarm_rules")),
    )
    op.create_index(
        op.f("ix_alarm_rules_model_id_name"), "alarm_rules", ["model_id", "name"], unique=True
    )
    op.create_table(
        "alarm_chart_streams",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("rule_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("segment_key", sa.String(64), nullable=False),
        sa.Column("segment_value", sa.String(128), nullable=False),
        sa.Column("state", sa.JSON(), nullable=True),
        sa.Column("design", sa.JSON(), nullable=True),
        sa.Column("watermark_at", _instant(), nullable=True),
        sa.Column("watermark_case", _case_id(), nullable=True),
        sa.Column("consumed", sa.Integer(), nullable=False),
        sa.Column("skipped_late", sa.Integer(), nullable=False),
        sa.Column("unlabelled_at_maturity", sa.Integer(), nullable=False),
        sa.Column("recent", sa.LargeBinary(), nullable=False),
        sa.Column("path", sa.JSON(), nullable=False),
        sa.Column("updated_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_alarm_chart_streams")),
    )
    op.create_index(
        op.f("ix_alarm_chart_streams_rule_id_version_segment_key_segment_value"),
        "alarm_chart_streams",
        ["rule_id", "version", "segment_key", "segment_value"],
        unique=True,
    )
    op.create_table(
        "alarms",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("rule_id", sa.Integer(), nullable=False),
        sa.Column("rule_name", sa.String(64), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("segment_key", sa.String(64), nullable=False),
        sa.Column("segment_value", sa.String(128), nullable=False),
        sa.Column("state", sa.String(16), nullable=False),
        sa.Column("open_key", sa.String(400), nullable=True),
        sa.Column("summary", sa.Text(), nullable=False),
        sa.Column("evidence", sa.JSON(), nullable=False),
        sa.Column("crossed_at", _instant(), nullable=False),
        sa.Column("opened_at", _instant(), nullable=False),
        sa.Column("resolved_at", _instant(), nullable=True),
        sa.Column("resolved_by", sa.String(64), nullable=True),
        sa.Column("resolution", sa.JSON(), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_alarms")),
    )
    op.create_index(op.f("ix_alarms_open_key"), "alarms", ["open_key"], unique=True)
    op.create_index(
        op.f("ix_alarms_model_id_state_opened_at"), "alarms", ["model_id", "state", "opened_at"]
    )
    op.create_table(
        "alarm_model_state",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("defaults_created_at", _instant(), nullable=False),
        sa.Column("evaluated_at", _instant(), nullable=True),
        sa.PrimaryKeyConstraint("model_id", name=op.f("pk_alarm_model_state")),
    )


def downgrade() -> None:
    op.drop_table("alarm_model_state")
    op.drop_index(op.f("ix_alarms_model_id_state_opened_at"), table_name="alarms")
    op.drop_index(op.f("ix_alarms_open_key"), table_name="alarms")
    op.drop_table("alarms")
    op.drop_index(
        op.f("ix_alarm_chart_streams_rule_id_version_segment_key_segment_value"),
        table_name="alarm_chart_streams",
    )
    op.drop_table("alarm_chart_streams")
    op.drop_index(op.f("ix_alarm_rules_model_id_name"), table_name="alarm_rules")
    op.drop_table("alarm_rules")
