"""The record of what retention sealed: which summaries stay as they were computed.

Retention removes a model's raw rows scored before a UTC midnight and advances the model's
``pruned_before`` to it. The summaries of the hours before it can no longer be recomputed, so
each advance is kept here with the settings generation the summaries were computed under: a
later settings change recomputes the retained hours only, and a metrics period reaching into a
seal whose generation is older than the model's says so.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Index, Integer
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base
from calibrant.store.types import BigIntPK


class RetentionSeal(Base):
    """Hours in [sealed_from, sealed_before) of a model were sealed at ``sealed_at``."""

    __tablename__ = "retention_seals"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer)
    sealed_from: Mapped[datetime | None] = mapped_column(nullable=True)  # None: from the beginning
    sealed_before: Mapped[datetime]
    settings_generation: Mapped[int] = mapped_column(Integer)
    sealed_at: Mapped[datetime]

    __table_args__ = (Index(None, "model_id", "sealed_before"),)
