"""Refresh-job rows: start one or meet the running one, beat its heart, end it, read it.

Starting is race-free on both databases without a lock taken by hand: the insert
carries ``running_slot = 'refresh'`` under a unique key with ON CONFLICT DO NOTHING,
so of two processes starting at once one inserts and the other inserts nothing
and reads the winner (on PostgreSQL the loser's insert waits for the winner's
transaction to end, then sees its row). A job whose process died stops beating;
once its heartbeat is older than the lease, the next start marks it abandoned,
frees the slot, and takes it, under a condition on the heartbeat it read, so two
processes cannot both take over.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, cast

from sqlalchemy import Table, select, update

from calibrant.store.refresh_job_tables import RefreshJob
from calibrant.store.tables import Model
from calibrant.store.unit import Connection
from calibrant.store.upsert import insert_for

SLOT = "refresh"
RUNNING = "running"
FINAL_STATES = frozenset({"succeeded", "failed", "abandoned"})
_TABLE = cast(Table, RefreshJob.__table__)


@dataclass(frozen=True)
class JobRow:
    id: str
    state: str
    worker: str
    requested_by: str
    started_at: datetime
    heartbeat_at: datetime
    finished_at: datetime | None
    progress: dict[str, Any]
    result: dict[str, Any] | None
    errors: list[str]


def _row(values: Any) -> JobRow:
    return JobRow(values.id, values.state, values.worker, values.requested_by, values.started_at,
                  values.heartbeat_at, values.finished_at, dict(values.progress or {}),
                  values.result, list(values.errors or []))


_COLUMNS = [c for c in _TABLE.c if c.name != "running_slot"]


def get(conn: Connection, job_id: str) -> JobRow | None:
    found = conn.execute(select(*_COLUMNS).where(_TABLE.c.id == job_id)).one_or_none()
    return _row(found) if found is not None else None


def running(conn: Connection) -> JobRow | None:
    found = conn.execute(select(*_COLUMNS).where(_TABLE.c.running_slot == SLOT)).one_or_none()
    return _row(found) if found is not None else None


def start_or_join(
    conn: Connection, job_id: str, *, worker: str, requested_by: str, now: datetime,
    stale_before: datetime, progress: dict[str, Any],
) -> tuple[JobRow, bool]:
    """The running job, or a new one with ``job_id``; True when this call started it."""
    for _ in range(3):
        held = running(conn)
        if held is not None and held.heartbeat_at >= stale_before:
            return held, False
        if held is not None:
            _abandon(conn, held, now)
        stmt = insert_for(conn.dialect.name, _TABLE).values(
            id=job_id, state=RUNNING, running_slot=SLOT, worker=worker, requested_by=requested_by,
            started_at=now, heartbeat_at=now, finished_at=None, progress=progress, result=None, errors=[],
        ).on_conflict_do_nothing().returning(_TABLE.c.id)
        # RETURNING, not rowcount: psycopg reports no reliable rowcount for INSERT ... ON CONFLICT.
        if conn.execute(stmt).first() is not None:
            started = get(conn, job_id)
            assert started is not None
            return started, True
        # Another process took the slot between our read and our insert: read its job again.
    raise RuntimeError("the refresh-job slot changed hands three times in one start; try again")


def _abandon(conn: Connection, held: JobRow, now: datetime) -> None:
    """Free the slot of a job nobody runs any more, if its heartbeat is still the one we read."""
    note = (f"abandoned at {now.isoformat()}: its runner {held.worker} stopped beating "
            f"(last heartbeat {held.heartbeat_at.isoformat()})")
    conn.execute(
        update(_TABLE)
        .where(_TABLE.c.id == held.id, _TABLE.c.running_slot == SLOT,
               _TABLE.c.heartbeat_at == held.heartbeat_at)
        .values(state="abandoned", running_slot=None, finished_at=now, errors=[*held.errors, note])
    )


def beat(conn: Connection, job_id: str, worker: str, now: datetime, progress: dict[str, Any]) -> bool:
    """Record that the runner lives and how far it got; False if the job is no longer its own."""
    result = conn.execute(
        update(_TABLE)
        .where(_TABLE.c.id == job_id, _TABLE.c.worker == worker, _TABLE.c.running_slot == SLOT)
        .values(heartbeat_at=now, progress=progress)
    )
    return result.rowcount == 1


def finish(
    conn: Connection, job_id: str, worker: str, *, state: str, now: datetime, progress: dict[str, Any],
    result: dict[str, Any] | None, errors: list[str],
) -> bool:
    """End the job and free the slot; False if it was abandoned meanwhile (its end is then not ours)."""
    if state not in FINAL_STATES:
        raise ValueError(f"not a final state: {state}")
    done = conn.execute(
        update(_TABLE)
        .where(_TABLE.c.id == job_id, _TABLE.c.worker == worker, _TABLE.c.running_slot == SLOT)
        .values(state=state, running_slot=None, finished_at=now, heartbeat_at=now, progress=progress,
                result=result, errors=errors)
    )
    return done.rowcount == 1


def model_names(conn: Connection) -> dict[int, str]:
    """Every model's name by id, to show a job's progress by model."""
    return {int(i): str(n) for i, n in conn.execute(select(Model.id, Model.name))}
