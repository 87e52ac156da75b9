"""The schema. Alembic migrations (top-level ``migrations/``) are the only way
it is created; ``alembic check`` in the tests catches drift between the two.

The hot tables (``predictions``, ``outcomes``) carry no foreign keys and as few
indexes as the access paths need: every index and foreign key is paid for on
each ingested row.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    Double,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    SmallInteger,
    String,
    Text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from calibrant.store.types import BigIntPK, UTCDateTime, case_id_type

NAMING_CONVENTION = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_N_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map = {datetime: UTCDateTime()}  # noqa: RUF012 — SQLAlchemy reads it as a class attribute


class Model(Base):
    """A deployed classifier whose probabilities are watched, and its monitoring settings."""

    __tablename__ = "models"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
    description: Mapped[str] = mapped_column(Text, default="")
    outcome_horizon_days: Mapped[int | None] = mapped_column(Integer, nullable=True)
    outcome_lag_days: Mapped[int] = mapped_column(Integer, default=0)
    implicit_negatives: Mapped[bool] = mapped_column(Boolean, default=False)
    segment_keys: Mapped[list[str]] = mapped_column(JSON, default=list)
    reference: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    # One false-alarm budget for all of the model's rules (alarms.budget).
    false_alarms_per_year: Mapped[float] = mapped_column(Double, default=1.0)
    # The measured outcome delay (rollup.outcome_delay.DelayEstimate as JSON), rewritten by the
    # alarms job; None until the model has reported outcomes.
    outcome_delay: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    # Bumped whenever a setting that changes summaries changes (keys, horizon,
    # lag, implicit negatives), so the rollup knows to rebuild.
    settings_generation: Mapped[int] = mapped_column(Integer, default=1)
    created_at: Mapped[datetime]
    updated_at: Mapped[datetime]


class Prediction(Base):
    """One scored case of one model version. Unique per (model, case, version).

    The key leads with (model_id, case_id) so that finding every version's
    prediction of a case, which each outcome needs, uses the primary key.
    """

    __tablename__ = "predictions"

    model_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    case_id: Mapped[str] = mapped_column(case_id_type(), primary_key=True)
    version: Mapped[str] = mapped_column(String(64), primary_key=True)
    probability: Mapped[float] = mapped_column(Double)  # float64; never float32 (docs/methods.md §1.2)
    scored_at: Mapped[datetime]
    tags: Mapped[str | None] = mapped_column(Text, nullable=True)  # canonical JSON, sorted keys
    received_at: Mapped[datetime]

    __table_args__ = (Index(None, "model_id", "version", "scored_at"),)


class Outcome(Base):
    """The current label of a case. It applies to every version's prediction of the case."""

    __tablename__ = "outcomes"

    model_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    case_id: Mapped[str] = mapped_column(case_id_type(), primary_key=True)
    label: Mapped[int] = mapped_column(SmallInteger)
    observed_at: Mapped[datetime]
    # observed_at of the first label, kept through corrections: the case's delay from scoring
    # to report (rollup.outcome_delay) is measured from it.
    first_observed_at: Mapped[datetime]
    # When the event happened, if the sender said (observed_at is when it was reported). With a
    # horizon, an event that happened after it counts as a 0 (rollup.outcome_delay).
    occurred_at: Mapped[datetime | None] = mapped_column(nullable=True)
    received_at: Mapped[datetime]
    revision: Mapped[int] = mapped_column(Integer, default=1)  # 1 = first label; +1 per correction

    # The delay measure reads the cases first reported in its look-back (store.delay_repo).
    __table_args__ = (Index(None, "model_id", "first_observed_at"),)


class OutcomeRevision(Base):
    """Every label a case has had, oldest first: corrections never erase history."""

    __tablename__ = "outcome_revisions"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    case_id: Mapped[str] = mapped_column(case_id_type())
    revision: Mapped[int] = mapped_column(Integer)
    label: Mapped[int] = mapped_column(SmallInteger)
    observed_at: Mapped[datetime]
    occurred_at: Mapped[datetime | None] = mapped_column(nullable=True)
    received_at: Mapped[datetime]

    __table_args__ = (Index(None, "model_id", "case_id", "revision", unique=True),)


class ApiKey(Base):
    """A scoped bearer key. Only a hash of the secret is kept."""

    __tablename__ = "api_keys"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    key_id: Mapped[str] = mapped_column(String(32), unique=True)  # public part, shown in lists
    secret_hash: Mapped[str] = mapped_column(String(64))  # SHA-256 hex of the secret part
    scope: Mapped[str] = mapped_column(String(16))
    model_name: Mapped[str | None] = mapped_column(String(64), nullable=True)
    label: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime]
    revoked_at: Mapped[datetime | None] = mapped_column(nullable=True)


class AuditEvent(Base):
    """Append-only record of every change to models, settings and keys."""

    __tablename__ = "audit_events"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    at: Mapped[datetime]
    actor: Mapped[str] = mapped_column(String(64))
    action: Mapped[str] = mapped_column(String(64))
    target: Mapped[str] = mapped_column(String(200))
    detail: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    model_id: Mapped[int | None] = mapped_column(
        Integer, ForeignKey("models.id", ondelete="SET NULL"), nullable=True
    )
