"""Tables of what was in force when: settings and rules versions, monitoring-plan versions,
and the stored report snapshots.

All three are append-only. A version is in force from its ``recorded_at`` until the next
version of the same model and subject; a report snapshot is the report's reproducible body
as it was generated, kept so that it can be served after the raw rows it came from are gone.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base
from calibrant.store.types import BigIntPK

SETTINGS = "settings"
RULES = "rules"


class SettingsVersion(Base):
    """The whole of a model's settings (subject ``settings``) or rules (``rules``) after a change."""

    __tablename__ = "settings_versions"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    subject: Mapped[str] = mapped_column(String(16))
    recorded_at: Mapped[datetime]
    actor: Mapped[str] = mapped_column(String(64))
    content: Mapped[Any] = mapped_column(JSON)

    __table_args__ = (Index(None, "model_id", "subject", "recorded_at"),)


class PlanVersion(Base):
    """One version of a model's monitoring plan; versions count 1, 2, … per model."""

    __tablename__ = "plan_versions"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    version: Mapped[int] = mapped_column(Integer)
    recorded_at: Mapped[datetime]
    actor: Mapped[str] = mapped_column(String(64))
    content: Mapped[dict[str, Any]] = mapped_column(JSON)

    __table_args__ = (Index(None, "model_id", "version", unique=True),)


class ReportSnapshot(Base):
    """A generated report's reproducible body (canonical JSON) and its SHA-256."""

    __tablename__ = "report_snapshots"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    start: Mapped[datetime]
    end: Mapped[datetime]
    as_of: Mapped[datetime]
    content_hash: Mapped[str] = mapped_column(String(64))
    generated_at: Mapped[datetime]
    actor: Mapped[str] = mapped_column(String(64))
    body: Mapped[str] = mapped_column(Text)

    __table_args__ = (
        Index(None, "model_id", "start", "end", "as_of", "content_hash", unique=True),
        Index(None, "model_id", "end"),
    )
