"""Rollup: hourly bucket summaries, dirty marks, segment values, references, job runs.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None

_BIGINT_PK = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "bucket_summaries",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("segment_key", sa.String(64), nullable=False),
        sa.Column("segment_value", sa.String(128), nullable=False),
        sa.Column("hour", _instant(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("payload", sa.LargeBinary(), nullable=False),
        sa.Column("computed_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint(
            "model_id", "version", "segment_key", "segment_value", "hour", name=op.f("pk_bucket_summaries")
        ),
    )
    op.create_index(
        op.f("ix_bucket_summaries_model_id_segment_key_segment_value_hour"),
        "bucket_summaries",
        ["model_id", "segment_key", "segment_value", "hour"],
    )
    op.create_table(
        "dirty_buckets",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("hour", _instant(), nullable=False),
        sa.Column("generation", sa.Integer(), nullable=False),
        sa.Column("marked_at", _instant(), nullable=False),
        sa.Column("claimed_by", sa.String(64), nullable=True),
        sa.Column("claimed_until", _instant(), nullable=True),
        sa.PrimaryKeyConstraint("model_id", "version", "hour", name=op.f("pk_dirty_buckets")),
    )
    op.create_table(
        "segment_values",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("segment_key", sa.String(64), nullable=False),
        sa.Column("segment_value", sa.String(128), nullable=False),
        sa.Column("first_seen", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("model_id", "segment_key", "segment_value", name=op.f("pk_segment_values")),
    )
    op.create_table(
        "reference_samples",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("payload", sa.LargeBinary(), nullable=False),
        sa.Column("description", sa.String(500), nullable=False),
        sa.Column("uploaded_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_reference_samples")),
        sa.UniqueConstraint("model_id", name=op.f("uq_reference_samples_model_id")),
    )
    op.create_table(
        "job_runs",
        sa.Column("id", _BIGINT_PK, autoincrement=True, nullable=False),
        sa.Column("job", sa.String(64), nullable=False),
        sa.Column("worker", sa.String(64), nullable=False),
        sa.Column("started_at", _instant(), nullable=False),
        sa.Column("finished_at", _instant(), nullable=False),
        sa.Column("units", sa.Integer(), nullable=False),
        sa.Column("rows", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_job_runs")),
    )
    op.create_index(op.f("ix_job_runs_job_finished_at"), "job_runs", ["job", "finished_at"])


def downgrade() -> None:
    op.drop_index(op.f("ix_job_runs_job_finished_at"), "job_runs")
    op.drop_table("job_runs")
    op.drop_table("reference_samples")
    op.drop_table("segment_values")
    op.drop_table("dirty_buckets")
    op.drop_index(op.f("ix_bucket_summaries_model_id_segment_key_segment_value_hour"), "bucket_summaries")
    op.drop_table("bucket_summaries")
