"""What was in force when: settings and rules versions, monitoring-plan versions, report snapshots.

Three new append-only tables; no existing data moves. A model whose settings or rules have
not changed since this revision has no version yet: the first change records the state it
replaces (``models.history``), and until then the current state is the one in force.

Revision ID: 0013
Revises: 0010
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0013"
down_revision = "0010"
branch_labels = None
depends_on = None

_BIGINT_PK = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "settings_versions",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("subject", sa.String(16), nullable=False),
        sa.Column("recorded_at", _instant(), nullable=False),
        sa.Column("actor", sa.String(64), nullable=False),
        sa.Column("content", sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_settings_versions")),
    )
    op.create_index(
        op.f("ix_settings_versions_model_id_subject_recorded_at"),
        "settings_versions",
        ["model_id", "subject", "recorded_at"],
    )
    op.create_table(
        "plan_versions",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("recorded_at", _instant(), nullable=False),
        sa.Column("actor", sa.String(64), nullable=False),
        sa.Column("content", sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_plan_versions")),
    )
    op.create_index(
        op.f("ix_plan_versions_model_id_version"), "plan_versions", ["model_id", "version"], unique=True
    )
    op.create_table(
        "report_snapshots",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("start", _instant(), nullable=False),
        sa.Column("end", _instant(), nullable=False),
        sa.Column("as_of", _instant(), nullable=False),
        sa.Column("content_hash", sa.String(64), nullable=False),
        sa.Column("generated_at", _instant(), nullable=False),
        sa.Column("actor", sa.String(64), nullable=False),
        sa.Column("body", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_report_snapshots")),
    )
    op.create_index(
        op.f("ix_report_snapshots_model_id_start_end_as_of_content_hash"),
        "report_snapshots",
        ["model_id", "start", "end", "as_of", "content_hash"],
        unique=True,
    )
    op.create_index(op.f("ix_report_snapshots_model_id_end"), "report_snapshots", ["model_id", "end"])


def downgrade() -> None:
    op.drop_index(op.f("ix_report_snapshots_model_id_end"), table_name="report_snapshots")
    op.drop_index(
        op.f("ix_report_snapshots_model_id_start_end_as_of_content_hash"), table_name="report_snapshots"
    )
    op.drop_table("report_snapshots")
    op.drop_index(op.f("ix_plan_versions_model_id_version"), table_name="plan_versions")
    op.drop_table("plan_versions")
    op.drop_index(op.f("ix_settings_versions_model_id_subject_recorded_at"), table_name="settings_versions")
    op.drop_table("settings_versions")
