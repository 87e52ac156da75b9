"""Every statement on ``job_failures``: read a job's failing models, record a failure, clear one."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, cast

from sqlalchemy import Connection, Select, Table, delete, select

from calibrant.store.job_failure_tables import JobFailure
from calibrant.store.tables import Model
from calibrant.store.upsert import insert_for

T = cast(Table, JobFailure.__table__)


@dataclass(frozen=True, slots=True)
class FailureRecord:
    """A model one job could not process, as stored."""

    model_id: int
    model: str
    job: str
    error_class: str
    error_message: str
    attempts: int
    first_seen_at: datetime
    last_seen_at: datetime
    retry_at: datetime
    quarantined_at: datetime | None

    @property
    def quarantined(self) -> bool:
        return self.quarantined_at is not None

    def held_back_at(self, now: datetime) -> bool:
        """Whether the job skips the model at ``now``: quarantined, or waiting for its retry."""
        return self.quarantined or now < self.retry_at


def _select() -> Select[*tuple[Any, ...]]:
    return (
        select(JobFailure.model_id, Model.name, JobFailure.job, JobFailure.error_class,
               JobFailure.error_message, JobFailure.attempts, JobFailure.first_seen_at,
               JobFailure.last_seen_at, JobFailure.retry_at, JobFailure.quarantined_at)
        .join(Model, Model.id == JobFailure.model_id)
        .order_by(Model.name, JobFailure.job)
    )


def _records(conn: Connection, query: Select[*tuple[Any, ...]]) -> list[FailureRecord]:
    return [FailureRecord(*row) for row in conn.execute(query)]


def of_job(conn: Connection, job: str) -> dict[int, FailureRecord]:
    """The failing models of ``job``, by model id."""
    return {r.model_id: r for r in _records(conn, _select().where(JobFailure.job == job))}


def of_model(conn: Connection, model_id: int) -> list[FailureRecord]:
    return _records(conn, _select().where(JobFailure.model_id == model_id))


def everything(conn: Connection) -> list[FailureRecord]:
    """Every failure of every job, by model name then job."""
    return _records(conn, _select())


def save(conn: Connection, model_id: int, job: str, *, error_class: str, error_message: str,
         attempts: int, first_seen_at: datetime, now: datetime, retry_at: datetime,
         quarantined_at: datetime | None) -> None:
    """Write the model's failure record for ``job`` (insert, or replace the one there)."""
    values = {
        "model_id": model_id, "job": job, "error_class": error_class[:128], "error_message": error_message,
        "attempts": attempts, "first_seen_at": first_seen_at, "last_seen_at": now, "retry_at": retry_at,
        "quarantined_at": quarantined_at,
    }
    stmt = insert_for(conn.dialect.name, T).values(values)
    changed = {k: v for k, v in values.items() if k not in {"model_id", "job", "first_seen_at"}}
    conn.execute(stmt.on_conflict_do_update(index_elements=["model_id", "job"], set_=changed))


def forget(conn: Connection, model_id: int, job: str) -> bool:
    """Drop the record (the job processed the model again); True if there was one."""
    result = conn.execute(delete(T).where(T.c.model_id == model_id, T.c.job == job))
    return bool(result.rowcount)


def forget_model(conn: Connection, model_id: int) -> list[FailureRecord]:
    """Drop every job's record of the model (an admin resumed it); the records dropped."""
    dropped = of_model(conn, model_id)
    conn.execute(delete(T).where(T.c.model_id == model_id))
    return dropped
