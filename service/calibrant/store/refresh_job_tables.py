"""Refresh jobs: one row per run of every job that POST /v1/refresh or ``calibrant refresh`` started.

At most one job runs at a time across every process on the database: a running
job holds ``running_slot = 'refresh'`` under a unique key, which a finished job
sets back to NULL (both SQLite and PostgreSQL let a unique column hold many NULLs).
Starting a job is an insert that either takes the slot or meets the running job.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, Index, String
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base


class RefreshJob(Base):
    __tablename__ = "refresh_jobs"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    state: Mapped[str] = mapped_column(String(16))  # running, succeeded, failed, abandoned
    running_slot: Mapped[str | None] = mapped_column(String(16), unique=True, nullable=True)
    worker: Mapped[str] = mapped_column(String(64))  # host:pid of the process running it
    requested_by: Mapped[str] = mapped_column(String(64))
    started_at: Mapped[datetime]
    heartbeat_at: Mapped[datetime]  # the runner writes it while alive; a stale one frees the slot
    finished_at: Mapped[datetime | None] = mapped_column(nullable=True)
    progress: Mapped[dict[str, Any]] = mapped_column(JSON)
    result: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    errors: Mapped[list[str]] = mapped_column(JSON)  # one line per failure, newest last

    __table_args__ = (Index(None, "started_at"),)
