"""Summaries of one (model, version) by hour or day: an index the set-based refresh deletes and reads by.

The primary keys of ``bucket_summaries`` and ``day_summaries`` lead with (model_id, version,
segment_key, segment_value), so a statement that names the hour (or day) but not the segment
walks every summary of the version: replacing a bucket's summaries cost 0.47 ms a bucket on
100k rows and grew with the table (measured, tests/bench/refresh.py). No data moves.

On PostgreSQL the payload columns of both tiers are stored EXTERNAL (out of line, never
compressed): pglz did not shrink stored summaries (52 MiB either way for 4,000 of them) but
tripled the time to write them (0.75–0.95 s against 0.22–0.26 s, measured).

Revision ID: 0017
Revises: 0013
Create Date: 2026-12-03
"""

from __future__ import annotations

from alembic import op

revision = "0017"
down_revision = "0016"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_index(op.f("ix_bucket_summaries_model_id_version_hour"), "bucket_summaries",
                    ["model_id", "version", "hour"])
    op.create_index(op.f("ix_day_summaries_model_id_version_day"), "day_summaries",
                    ["model_id", "version", "day"])
    _payload_storage("EXTERNAL")


def _payload_storage(kind: str) -> None:
    if op.get_bind().dialect.name == "postgresql":
        for table in ("bucket_summaries", "day_summaries"):
            op.execute(f"ALTER TABLE {table} ALTER COLUMN payload SET STORAGE {kind}")


def downgrade() -> None:
    _payload_storage("EXTENDED")
    op.drop_index(op.f("ix_day_summaries_model_id_version_day"), table_name="day_summaries")
    op.drop_index(op.f("ix_bucket_summaries_model_id_version_hour"), table_name="bucket_summaries")
