"""Alarm records: open one per (rule, version, segment) stream, resolve it, each change into the outbox.

The one module that writes alarms. The evaluations (``charts``, ``windows``,
``feeds``) and the use cases (``service``) call it; it calls only the store
and ``notify.outbox``, so an alarm's path runs one way: decision → evaluation
→ record → outbox. It flushes, never commits: an alarm's state change and its
outbox event are written in the caller's one transaction, so the event exists
exactly when the change does.
"""

from __future__ import annotations

import logging
from datetime import datetime, timedelta
from typing import Any

from calibrant.notify import outbox, payloads
from calibrant.store import alarm_repo
from calibrant.store.alarm_tables import OPEN, RESOLVED, Alarm, AlarmRule
from calibrant.store.tables import Model
from calibrant.store.unit import Session, after_commit
from calibrant.vocabulary.segments import ALL_SEGMENT

log = logging.getLogger("calibrant.alarms")

ALL_VERSIONS = ""  # stored version of a model-wide (feed) alarm: no posted version is empty


def version_scope(stored: str) -> dict[str, str | None]:
    """How a stream's version reads in the API: a model-wide stream has no version, it has a scope."""
    if stored == ALL_VERSIONS:
        return {"version": None, "scope": "all_versions"}
    return {"version": stored, "scope": "version"}


def segment_out(key: str, value: str) -> dict[str, str] | None:
    """How a stream's segment reads in the API: null for every case, else its key and value."""
    return None if key == ALL_SEGMENT else {"key": key, "value": value}


def open_key(rule_id: int, version: str, segment: tuple[str, str]) -> str:
    """Unique among open alarms: at most one open alarm per (rule, version, segment)."""
    return f"{rule_id}|{version}|{segment[0]}|{segment[1]}"


def open_alarm_of(session: Session, rule: AlarmRule, version: str, segment: tuple[str, str]) -> Alarm | None:
    """The stream's open alarm, if any."""
    return alarm_repo.open_alarm_for(session, open_key(rule.id, version, segment))


def open_alarm(session: Session, model: Model, rule: AlarmRule, *, version: str, segment: tuple[str, str],
               crossed_at: datetime, evidence: dict[str, Any], summary: str, now: datetime) -> Alarm | None:
    """Open an alarm unless one is open for (rule, version, segment); write ``alarm.opened``."""
    key = open_key(rule.id, version, segment)
    if alarm_repo.open_alarm_for(session, key) is not None:
        return None
    alarm = Alarm(model_id=model.id, rule_id=rule.id, rule_name=rule.name, version=version,
                  segment_key=segment[0], segment_value=segment[1], state=OPEN, open_key=key,
                  summary=summary, evidence=evidence, crossed_at=crossed_at, opened_at=now)
    session.add(alarm)
    session.flush()
    _announce(session, model, alarm, payloads.ALARM_OPENED, now)
    return alarm


def resolve(session: Session, model: Model, alarm: Alarm, *, now: datetime, by: str,
            resolution: dict[str, Any]) -> Alarm:
    """Resolve an open alarm (``by`` a person or ``system``); write ``alarm.resolved``."""
    alarm.state = RESOLVED
    alarm.open_key = None
    alarm.resolved_at = now
    alarm.resolved_by = by
    alarm.resolution = resolution
    session.flush()
    _announce(session, model, alarm, payloads.ALARM_RESOLVED, now)
    return alarm


def auto_resolve(session: Session, model: Model, alarm: Alarm, *, now: datetime,
                 resolution: dict[str, Any]) -> Alarm:
    """A window or feed alarm whose condition no longer holds."""
    return resolve(session, model, alarm, now=now, by="system", resolution=resolution)


def _metrics_link(model: Model, alarm: Alarm) -> str:
    """The metrics query a reader follows from the event: the alarm's period, or the 28 days before."""
    evidence = alarm.evidence or {}
    if "period_start" in evidence:
        start = datetime.fromisoformat(evidence["period_start"])
        end = datetime.fromisoformat(evidence["period_end"])
        grain = evidence.get("granularity", "week")
    else:
        end = alarm.crossed_at + timedelta(days=1)
        start = end - timedelta(days=28)
        grain = "day"
    segment = None if alarm.segment_key == ALL_SEGMENT else (alarm.segment_key, alarm.segment_value)
    return payloads.metrics_query(model.name, start=start, end=end, granularity=grain,
                                  version=version_scope(alarm.version)["version"], segment=segment)


def _announce(session: Session, model: Model, alarm: Alarm, kind: str, now: datetime) -> None:
    segment = None if alarm.segment_key == ALL_SEGMENT else (alarm.segment_key, alarm.segment_value)
    data = payloads.alarm_data(
        alarm_id=alarm.id, rule=alarm.rule_name, state=alarm.state, model=model.name,
        version=version_scope(alarm.version)["version"], segment=segment, evidence=alarm.evidence,
        metrics_query=_metrics_link(model, alarm), opened_at=alarm.opened_at,
        resolved_at=alarm.resolved_at, summary=alarm.summary,
    )
    outbox.enqueue(session, kind, data, model_id=model.id, at=now)
    _log_change(session, model, alarm, kind)


def stream_name(version: str, segment_key: str, segment_value: str) -> str:
    """A stream as one word for a log line: ``<version>/<key>:<value>``; ``all_versions`` for a
    model-wide stream, ``all`` for every case (``v3/all``, ``all_versions/depot:harbour``)."""
    shown_version = "all_versions" if version == ALL_VERSIONS else version
    shown_segment = "all" if segment_key == ALL_SEGMENT else f"{segment_key}:{segment_value}"
    return f"{shown_version}/{shown_segment}"


def _log_change(session: Session, model: Model, alarm: Alarm, kind: str) -> None:
    """One structured line per opening or resolution, written only once the change is committed."""
    fields = {
        "event": kind,
        "model": model.name,
        "rule": alarm.rule_name,
        "stream": stream_name(alarm.version, alarm.segment_key, alarm.segment_value),
        "statistic": (alarm.evidence or {}).get("statistic"),
        "alarm_id": alarm.id,
    }
    message = kind + " " + " ".join(f"{key}={value}" for key, value in fields.items() if key != "event")
    after_commit(session, lambda: log.info(message, extra=fields))
