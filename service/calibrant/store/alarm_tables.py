"""Tables of the alarms: rules, chart streams, alarms, evaluated periods, per-model state.

A rule belongs to one model. A chart rule keeps one stream per (version,
segment): its resumable CUSUM state, the design its limit came from, its
watermark and its recent risks. An alarm is open until resolved; while open it
holds ``open_key`` (rule, version, segment), and a unique index on that column
is what makes "at most one open alarm per key" hold under concurrency (NULLs
of resolved alarms never collide, on either dialect).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, Boolean, Index, Integer, LargeBinary, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base
from calibrant.store.types import BigIntPK, case_id_type

OPEN = "open"
RESOLVED = "resolved"


class AlarmRule(Base):
    """What to watch, how, and with which parameters."""

    __tablename__ = "alarm_rules"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    name: Mapped[str] = mapped_column(String(64))
    kind: Mapped[str] = mapped_column(String(32))
    params: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    enabled: Mapped[bool] = mapped_column(Boolean, default=True)
    is_default: Mapped[bool] = mapped_column(Boolean, default=False)
    # Window rules: the end of the last period evaluated (periods are evaluated once).
    evaluated_through: Mapped[datetime | None] = mapped_column(nullable=True)
    created_at: Mapped[datetime]
    updated_at: Mapped[datetime]

    __table_args__ = (Index(None, "model_id", "name", unique=True),)


class ChartStream(Base):
    """One CUSUM chart of one rule over one (version, segment) stream of mature cases."""

    __tablename__ = "alarm_chart_streams"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    rule_id: Mapped[int] = mapped_column(Integer)
    version: Mapped[str] = mapped_column(String(64))
    segment_key: Mapped[str] = mapped_column(String(64))
    segment_value: Mapped[str] = mapped_column(String(128))
    state: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)  # CusumState.to_dict()
    design: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    # Processing order is (matured_at, case_id); the watermark is the last case consumed.
    watermark_at: Mapped[datetime | None] = mapped_column(nullable=True)
    watermark_case: Mapped[str | None] = mapped_column(case_id_type(), nullable=True)
    consumed: Mapped[int] = mapped_column(Integer, default=0)  # cases since the stream began
    skipped_late: Mapped[int] = mapped_column(Integer, default=0)  # since the last reset
    unlabeled_at_maturity: Mapped[int] = mapped_column(Integer, default=0)
    # Recent risks and their maturity times (float64 pairs) for designing h.
    recent: Mapped[bytes] = mapped_column(LargeBinary, default=b"")
    # The last few (matured_at, S) points, the "chart path" shown with an alarm.
    path: Mapped[list[Any]] = mapped_column(JSON, default=list)
    updated_at: Mapped[datetime]

    __table_args__ = (
        Index(None, "rule_id", "version", "segment_key", "segment_value", unique=True),
    )


class Alarm(Base):
    """An alarm: what crossed, on which stream, with which evidence, and its state."""

    __tablename__ = "alarms"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    rule_id: Mapped[int] = mapped_column(Integer)
    rule_name: Mapped[str] = mapped_column(String(64))
    version: Mapped[str] = mapped_column(String(64))
    segment_key: Mapped[str] = mapped_column(String(64))
    segment_value: Mapped[str] = mapped_column(String(128))
    state: Mapped[str] = mapped_column(String(16))
    open_key: Mapped[str | None] = mapped_column(String(400), nullable=True)
    summary: Mapped[str] = mapped_column(Text, default="")
    evidence: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    crossed_at: Mapped[datetime]  # data time: maturity time of the crossing case, or period end
    opened_at: Mapped[datetime]
    resolved_at: Mapped[datetime | None] = mapped_column(nullable=True)
    resolved_by: Mapped[str | None] = mapped_column(String(64), nullable=True)
    resolution: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    # A window alarm's period restated by outcomes that came after it was raised, oldest first
    # (alarms.restatements); the evidence itself is never rewritten.
    restatements: Mapped[list[dict[str, Any]] | None] = mapped_column(JSON, nullable=True)

    __table_args__ = (
        Index(None, "open_key", unique=True),
        Index(None, "model_id", "state", "opened_at"),
    )


class AlarmModelState(Base):
    """Per model: when its default rules were created (once; deleting one does not bring it back)."""

    __tablename__ = "alarm_model_state"

    model_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    defaults_created_at: Mapped[datetime]
    evaluated_at: Mapped[datetime | None] = mapped_column(nullable=True)
