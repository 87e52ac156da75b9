"""Feed rules (starvation), checked at every evaluation: open while the condition holds, then resolve.

``feed_counts`` reads what ``kinds.starvation.decide`` judges: the hours since
the model's newest prediction, and two windows of mature predictions with how
many have an outcome: the recent ``window_days`` ending with the newest mature
hour, and the ``history_days`` just before. The windows move with the
evaluation hour, so the rule's test is made once per evaluated hour:
``evaluate_rule`` turns the rule's yearly share of the model's false-alarm
budget (``alarms.budget.split``) into the per-hour level it passes to the
kind, α = share / (24 × 365.25) (``alarms.budget.per_test_level``). The windows
end on a whole hour, so job runs within one hour repeat that hour's test on
the same windows rather than add tests.

The windows are counted only when the outcome test can apply: with implicit
negatives a missing outcome is an outcome, and without an outcome horizon no
prediction is ever overdue; then only the silence is checked.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from calibrant.alarms import kinds, records
from calibrant.alarms.budget import HOURS_PER_YEAR, per_test_level
from calibrant.alarms.kinds.base import FeedInputs, FeedKind, LabelCounts
from calibrant.clock import rfc3339
from calibrant.rollup import query
from calibrant.stats.summary import Summary
from calibrant.store import alarm_repo
from calibrant.store.alarm_tables import AlarmRule
from calibrant.store.tables import Model
from calibrant.store.unit import Connection, Session
from calibrant.vocabulary.segments import ALL_SEGMENT

MODEL_WIDE = (ALL_SEGMENT, ALL_SEGMENT)


@dataclass
class FeedReport:
    opened: int = 0
    resolved: int = 0


def _label_counts(conn: Connection, model: Model, start: datetime, end: datetime,
                  boundary: datetime) -> LabelCounts:
    """Mature predictions scored in [start, end) over all versions, and how many have an outcome."""
    days = query.load_days(conn, model, start, end, segment=MODEL_WIDE, version=None, boundary=boundary)
    counts = Summary.merge_many(list(days.mature.values())).counts()
    labeled = counts["positive"] + counts["negative"]
    # Unweighted summaries: each count is a whole number held as a float.
    return LabelCounts(mature=round(labeled + counts["unlabeled"]), labeled=round(labeled))


def feed_counts(session: Session, model: Model, window_days: int, history_days: int,
                now: datetime) -> FeedInputs:
    """The silence, and (when the outcome test applies) the recent and history mature windows."""
    conn = session.connection()
    last = alarm_repo.last_scored_at(conn, model.id, alarm_repo.versions_of(conn, model.id))
    silence = None if last is None else (now - last).total_seconds() / 3600.0
    implicit = bool(model.implicit_negatives)
    boundary = query.maturity_boundary(model, now)
    recent = history = None
    if boundary is not None and not implicit:
        # The newest mature hour is the one the boundary falls in (it starts at or before it): the
        # recent window ends after it, so both windows are whole hours whatever the minute of ``now``.
        end = boundary.replace(minute=0, second=0, microsecond=0) + timedelta(hours=1)
        split = end - timedelta(days=window_days)
        recent = _label_counts(conn, model, split, end, boundary)
        history = _label_counts(conn, model, split - timedelta(days=history_days), split, boundary)
    return FeedInputs(silence_hours=silence, implicit_negatives=implicit, has_horizon=boundary is not None,
                      recent=recent, history=history)


def evaluate_rule(session: Session, model: Model, rule: AlarmRule, now: datetime, *,
                  share: float | None) -> FeedReport:
    """Judge the feeds now: open the model-wide alarm, resolve it, or leave it as it is.

    ``share``: the rule's yearly share of the model's false-alarm budget; its
    test runs at α = share / (24 × 365.25). None (a rule without a share) makes
    the level 0, so only the silence condition can open an alarm.
    """
    kind = kinds.spec(rule.kind)
    if not isinstance(kind, FeedKind):
        raise TypeError(f"a {rule.kind} rule is not a feed rule")
    params: Any = kind.params.model_validate(rule.params)
    level = 0.0 if share is None else per_test_level(share, HOURS_PER_YEAR, 1)
    feeds = feed_counts(session, model, params.window_days, params.history_days, now)
    verdict = kind.decide(params, feeds, level)
    current = records.open_alarm_of(session, rule, records.ALL_VERSIONS, MODEL_WIDE)
    if verdict.crossed and current is None:
        records.open_alarm(session, model, rule, version=records.ALL_VERSIONS, segment=MODEL_WIDE,
                           crossed_at=now, summary=f"{rule.name}: {verdict.summary}", now=now,
                           evidence={"statistic": verdict.statistic, "interval": None, "n": verdict.n,
                                     "detail": verdict.detail, "budget_share_per_year": share,
                                     "level": level, "checked_at": rfc3339(now)})
        return FeedReport(opened=1)
    if verdict.crossed is False and current is not None:
        records.auto_resolve(session, model, current, now=now,
                             resolution={"reason": "feeds healthy again", "summary": verdict.summary})
        return FeedReport(resolved=1)
    return FeedReport()
