"""Summaries of one (model, version) by hour or day: an index the set-based refresh deletes and reads by.

The primary keys of ``bucket_summaries`` and ``day_summaries`` lead with (model_id, version,
segment_key, segment_value), so a statement that names the hour (or day) but not the segment
walks every summary of the version: replacing a bucket's summaries cost 0.47 ms a bucket on
100k rows and grew with the table (measured, tests/bench/refresh.py). No data moves.

Revision ID: 0017
Revises: 0013
Create Date: 2026-12-03
"""

from __future__ import annotations

from alembic import op

revision = "0017"
down_revision = "0013"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_index(op.f("ix_bucket_summaries_model_id_version_hour"), "bucket_summaries",
                    ["model_id", "version", "hour"])
    op.create_index(op.f("ix_day_summaries_model_id_version_day"), "day_summaries",
                    ["model_id", "version", "day"])


def downgrade() -> None:
    op.drop_index(op.f("ix_day_summaries_model_id_version_day"), table_name="day_summaries")
    op.drop_index(op.f("ix_bucket_summaries_model_id_version_hour"), table_name="bucket_summaries")
