"""Failures of a background job on one model: what broke, since when, and whether the model is held back."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import ForeignKey, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base


class JobFailure(Base):
    """One model that one job could not process (``models.isolation``).

    The row exists while the failure lasts: a later success deletes it, and so does an
    admin's resume. ``retry_at`` is when the job tries the model again (exponential
    backoff); ``quarantined_at`` is set once the attempts reach the cap, and then the job
    skips the model until an admin resumes it.
    """

    __tablename__ = "job_failures"

    model_id: Mapped[int] = mapped_column(
        Integer, ForeignKey("models.id", ondelete="CASCADE"), primary_key=True
    )
    job: Mapped[str] = mapped_column(String(32), primary_key=True)
    error_class: Mapped[str] = mapped_column(String(128))
    error_message: Mapped[str] = mapped_column(Text)
    attempts: Mapped[int] = mapped_column(Integer)
    first_seen_at: Mapped[datetime]
    last_seen_at: Mapped[datetime]
    retry_at: Mapped[datetime]
    quarantined_at: Mapped[datetime | None] = mapped_column(nullable=True)
