"""SQL behind ``GET /metrics``: stored-row counters, feed times, open alarms, the rollup backlog.

Each function is one grouped statement over every model, so a scrape costs a
fixed number of round trips however many models there are.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime

from sqlalchemy import Connection, func, select

from calibrant.store.alarm_tables import OPEN, Alarm, AlarmRule
from calibrant.store.rollup_tables import BucketSummary, DirtyBucket, DirtyDay
from calibrant.store.tables import Outcome, Prediction


def _utc(value: datetime | None) -> datetime | None:
    # SQLite's MIN()/MAX() bypass the column type and hand back a naive datetime.
    return value.replace(tzinfo=UTC) if value is not None and value.tzinfo is None else value


def stored_counts(conn: Connection) -> tuple[dict[int, int], dict[int, int]]:
    """Per model id: predictions stored, outcomes stored (one row per case; corrections not counted)."""
    predictions = conn.execute(select(Prediction.model_id, func.count()).group_by(Prediction.model_id))
    outcomes = conn.execute(select(Outcome.model_id, func.count()).group_by(Outcome.model_id))
    return {m: int(n) for m, n in predictions}, {m: int(n) for m, n in outcomes}


def last_outcome_observed(conn: Connection) -> dict[int, datetime]:
    """Per model id: the latest time a case's label was first observed (an index probe per model)."""
    rows = conn.execute(
        select(Outcome.model_id, func.max(Outcome.first_observed_at)).group_by(Outcome.model_id)
    )
    return {m: t for m, raw in rows if (t := _utc(raw)) is not None}


def open_alarms_by_rule(conn: Connection) -> dict[int, dict[str, int]]:
    """Per model id, per rule name: open alarms; every rule appears, with 0 when none is open."""
    out: dict[int, dict[str, int]] = {}
    for model_id, name in conn.execute(select(AlarmRule.model_id, AlarmRule.name)):
        out.setdefault(model_id, {})[name] = 0
    rows = conn.execute(
        select(Alarm.model_id, Alarm.rule_name, func.count())
        .where(Alarm.state == OPEN)
        .group_by(Alarm.model_id, Alarm.rule_name)
    )
    for model_id, name, n in rows:
        out.setdefault(model_id, {})[name] = int(n)
    return out


@dataclass(frozen=True, slots=True)
class RollupBacklog:
    hours: int  # dirty hour marks waiting for their recomputation
    days: int  # dirty day marks waiting for their merge
    oldest_marked_at: datetime | None  # the longest-waiting mark of either tier


def rollup_backlog(conn: Connection) -> RollupBacklog:
    hours, oldest_hour = conn.execute(select(func.count(), func.min(DirtyBucket.marked_at))).one()
    days, oldest_day = conn.execute(select(func.count(), func.min(DirtyDay.marked_at))).one()
    marks = [t for t in (_utc(oldest_hour), _utc(oldest_day)) if t is not None]
    return RollupBacklog(int(hours), int(days), min(marks) if marks else None)


def known_versions(conn: Connection) -> dict[int, list[str]]:
    """Per model id, the versions the rollup knows (summarised or waiting): small tables, no scan of
    ``predictions``, so the feed's latest ``scored_at`` can then be found by one index probe a version."""
    out: dict[int, set[str]] = {}
    for table in (BucketSummary, DirtyBucket):
        for model_id, version in conn.execute(select(table.model_id, table.version).distinct()):
            out.setdefault(model_id, set()).add(version)
    return {m: sorted(v) for m, v in out.items()}
