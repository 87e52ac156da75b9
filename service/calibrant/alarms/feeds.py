"""Feed rules (starvation), checked at every evaluation: open while the condition holds, then resolve.

The outcome-share half needs a horizon: without one, a prediction is never
mature-without-outcome, so only silence is checked.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from calibrant.alarms import kinds, records
from calibrant.alarms.kinds.base import FeedInputs, FeedKind
from calibrant.clock import rfc3339
from calibrant.rollup import query
from calibrant.stats.summary import Summary
from calibrant.store import alarm_repo
from calibrant.store.alarm_tables import AlarmRule
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.segments import ALL_SEGMENT

MODEL_WIDE = (ALL_SEGMENT, ALL_SEGMENT)


@dataclass
class FeedReport:
    opened: int = 0
    resolved: int = 0


def feed_inputs(session: Session, model: Model, window_days: int, now: datetime) -> FeedInputs:
    """Hours since the model's last prediction, and its last ``window_days`` of mature predictions."""
    conn = session.connection()
    versions = alarm_repo.versions_of(conn, model.id)
    last = alarm_repo.last_scored_at(conn, model.id, versions)
    silence = None if last is None else (now - last).total_seconds() / 3600.0
    mature = unlabeled = 0.0
    boundary = query.maturity_boundary(model, now)
    if boundary is not None:
        # The newest mature hour is the one starting at the boundary: the window ends after it.
        end = boundary + timedelta(hours=1)
        days = query.load_days(conn, model, end - timedelta(days=window_days), end,
                               segment=MODEL_WIDE, version=None, boundary=boundary)
        counts = Summary.merge_many(list(days.mature.values())).counts()
        mature, unlabeled = sum(counts.values()), counts["unlabeled"]
    return FeedInputs(silence_hours=silence, mature=mature, unlabeled=unlabeled)


def evaluate_rule(session: Session, model: Model, rule: AlarmRule, now: datetime) -> FeedReport:
    """Judge the feeds now: open the model-wide alarm, resolve it, or leave it as it is."""
    kind = kinds.spec(rule.kind)
    if not isinstance(kind, FeedKind):
        raise TypeError(f"a {rule.kind} rule is not a feed rule")
    params: Any = kind.params.model_validate(rule.params)
    verdict = kind.decide(params, feed_inputs(session, model, params.window_days, now))
    current = records.open_alarm_of(session, rule, records.ALL_VERSIONS, MODEL_WIDE)
    if verdict.crossed and current is None:
        records.open_alarm(session, model, rule, version=records.ALL_VERSIONS, segment=MODEL_WIDE,
                           crossed_at=now, summary=f"{rule.name}: {verdict.summary}", now=now,
                           evidence={"statistic": verdict.statistic, "interval": None, "n": verdict.n,
                                     "detail": verdict.detail, "checked_at": rfc3339(now)})
        return FeedReport(opened=1)
    if verdict.crossed is False and current is not None:
        records.auto_resolve(session, model, current, now=now,
                             resolution={"reason": "feeds healthy again", "summary": verdict.summary})
        return FeedReport(resolved=1)
    return FeedReport()
