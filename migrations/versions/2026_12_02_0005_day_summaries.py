"""Daily tier of the rollup: day summaries and their dirty marks.

Existing hourly summaries get their days marked dirty, so the next refresh
builds the tier; until then queries fall back to the hours of dirty days.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

from __future__ import annotations

from datetime import UTC, datetime

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def _instant() -> sa.DateTime:
    return sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "day_summaries",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("segment_key", sa.String(64), nullable=False),
        sa.Column("segment_value", sa.String(128), nullable=False),
        sa.Column("day", _instant(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("payload", sa.LargeBinary(), nullable=False),
        sa.Column("computed_at", _instant(), nullable=False),
        sa.PrimaryKeyConstraint(
            "model_id", "version", "segment_key", "segment_value", "day", name=op.f("pk_day_summaries")
        ),
    )
    op.create_index(
        op.f("ix_day_summaries_model_id_segment_key_segment_value_day"),
        "day_summaries",
        ["model_id", "segment_key", "segment_value", "day"],
    )
    dirty_days = op.create_table(
        "dirty_days",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.String(64), nullable=False),
        sa.Column("day", _instant(), nullable=False),
        sa.Column("generation", sa.Integer(), nullable=False),
        sa.Column("marked_at", _instant(), nullable=False),
        sa.Column("claimed_by", sa.String(64), nullable=True),
        sa.Column("claimed_until", _instant(), nullable=True),
        sa.PrimaryKeyConstraint("model_id", "version", "day", name=op.f("pk_dirty_days")),
    )
    _mark_existing_days(dirty_days)


def _mark_existing_days(dirty_days: sa.Table) -> None:
    """One mark per (model, version, UTC day) that has hourly summaries."""
    bind = op.get_bind()
    hours = sa.table("bucket_summaries", sa.column("model_id"), sa.column("version"),
                     sa.column("hour", _instant()))
    days: set[tuple[int, str, datetime]] = set()
    for model_id, version, hour in bind.execute(sa.select(hours.c.model_id, hours.c.version,
                                                          hours.c.hour).distinct()):
        instant = hour.replace(tzinfo=UTC) if hour.tzinfo is None else hour.astimezone(UTC)
        day = instant.replace(hour=0, minute=0, second=0, microsecond=0)
        days.add((model_id, version, day.replace(tzinfo=None) if bind.dialect.name == "sqlite" else day))
    now = datetime.now(UTC)
    if days:
        op.bulk_insert(dirty_days, [
            {"model_id": m, "version": v, "day": d, "generation": 1,
             "marked_at": now.replace(tzinfo=None) if bind.dialect.name == "sqlite" else now}
            for m, v, d in sorted(days)
        ])


def downgrade() -> None:
    op.drop_table("dirty_days")
    op.drop_index(op.f("ix_day_summaries_model_id_segment_key_segment_value_day"), "day_summaries")
    op.drop_table("day_summaries")
