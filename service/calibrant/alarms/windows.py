"""Window rules, judged once per closed, mature period; and the feed-starvation check.

A period (UTC day, ISO week or month) is evaluated when it has ended, every
bucket in it is mature (end + H + L < now) and no bucket of it waits for the
rollup. Each is evaluated once per (version, segment) stream — "all" and
every declared segment value — and the rule remembers how far it got
(``evaluated_through``), so backfilled history is evaluated the same way the
first time the rule runs. A firing stream opens an alarm unless one is open;
a stream judged within bounds resolves its open alarm; too little data
leaves an open alarm as it is.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy.orm import Session

from calibrant.alarms import rules, service
from calibrant.clock import rfc3339
from calibrant.rollup import query
from calibrant.rollup.periods import Granularity, Period, periods
from calibrant.rollup.references import reference_summary
from calibrant.stats.summary import Summary
from calibrant.store import alarm_repo, rollup_repo
from calibrant.store.alarm_tables import AlarmRule
from calibrant.store.rollup_tables import ALL_SEGMENT
from calibrant.store.tables import Model

MAX_PERIODS_PER_RUN = 60
ALL_VERSIONS = service.ALL_VERSIONS


@dataclass
class WindowReport:
    periods: int = 0
    opened: int = 0
    resolved: int = 0
    decisions: list[dict[str, Any]] = field(default_factory=list)  # for backtests


def _delay(model: Model) -> timedelta | None:
    if model.outcome_horizon_days is None:
        return None
    return timedelta(days=model.outcome_horizon_days + (model.outcome_lag_days or 0))


def ready(model: Model, period: Period, now: datetime) -> bool:
    """Closed and mature: its last bucket's end + H + L lies before now (strict, as ``load_days``)."""
    delay = _delay(model)
    return period.end <= now if delay is None else period.end + delay < now


def segments_of(session: Session, model: Model) -> list[tuple[str, str]]:
    values = rollup_repo.segment_values(session.connection(), model.id)
    return [(ALL_SEGMENT, ALL_SEGMENT)] + [
        (k, v) for k in (model.segment_keys or []) for v in values.get(k, [])
    ]


def log_loss_sums(summary: Summary, implicit_negatives: bool) -> rules.LogLossSums:
    v = summary.labeled(implicit_negatives)
    return rules.LogLossSums(n=v.total("all", "n"), n1=v.total("pos", "n"), sl=v.total("all", "sl"),
                         sh=v.total("all", "sh"), sv=v.total("all", "sv"))


def decide(rule: AlarmRule, params: Any, model: Model, period: Period, days: query.DaySlices,
           reference: Summary | None) -> rules.Decision:
    """The rule's verdict on one stream's period."""
    if isinstance(params, rules.ExcessLogLossParams):
        mature = Summary.merge_many([s for d, s in days.mature.items() if period.start <= d < period.end])
        ref = None
        if reference is not None:
            ref_sums = log_loss_sums(reference, False)
            ref = ref_sums if ref_sums.n > 0 else None
        return rules.excess_log_loss(log_loss_sums(mature, bool(model.implicit_negatives)), ref, params)
    metrics = query.period_metrics(period, days, model, reference)
    if isinstance(params, rules.ThresholdParams):
        return rules.threshold(metrics[params.metric], params)
    assert isinstance(params, rules.DriftParams)
    return rules.drift(metrics["psi"], params)


def evaluate_rule(session: Session, model: Model, rule: AlarmRule, now: datetime, *,
                  start: datetime | None = None, end: datetime | None = None,
                  dry_run: bool = False) -> WindowReport:
    """Evaluate the rule on every ready period not yet evaluated (or, for a backtest, in [start, end))."""
    report = WindowReport()
    kind = rules.Kind(rule.kind)
    params = rules.parse_params(kind, rule.params)
    conn = session.connection()
    grain = Granularity(params.granularity)  # type: ignore[attr-defined]
    first = start or rule.evaluated_through or alarm_repo.first_bucket_hour(conn, model.id)
    if first is None:
        return report
    last = min(end or now, now)
    spans = [p for p in periods(first, last, grain) if p.end <= last]
    if start is not None or rule.evaluated_through is not None:
        spans = [p for p in spans if p.start >= first]
    if not dry_run:
        spans = spans[:MAX_PERIODS_PER_RUN]
    reference = reference_summary(conn, model)
    streams = segments_of(session, model)
    versions = alarm_repo.versions_of(conn, model.id)
    per_year = rules.describe(kind, params, streams=len(versions) * len(streams),
                          chart_streams=1)["false_alarms"]["per_year"]
    for period in spans:
        if not ready(model, period, now) or alarm_repo.has_dirty_before(conn, model.id, period.end):
            break
        boundary = query.maturity_boundary(model, now)
        for version in versions:
            for segment in streams:
                days = query.load_days(conn, model, period.start, period.end, segment=segment,
                                       version=version, boundary=boundary)
                verdict = decide(rule, params, model, period, days, reference)
                _apply(session, model, rule, version, segment, period, verdict, per_year, now,
                       report, dry_run)
        report.periods += 1
        if not dry_run:
            rule.evaluated_through = period.end
    session.flush()
    return report


def _evidence(verdict: rules.Decision, period: Period, grain: str, per_year: float | None) -> dict[str, Any]:
    return {
        "statistic": verdict.statistic, "interval": list(verdict.interval) if verdict.interval else None,
        "n": verdict.n, "period_start": rfc3339(period.start), "period_end": rfc3339(period.end),
        "granularity": grain, "detail": verdict.detail, "expected_false_alarms_per_year": per_year,
    }


def _apply(session: Session, model: Model, rule: AlarmRule, version: str, segment: tuple[str, str],
           period: Period, verdict: rules.Decision, per_year: float | None, now: datetime,
           report: WindowReport, dry_run: bool) -> None:
    grain = rule.params.get("granularity", "week")
    if dry_run:
        if verdict.crossed:
            report.decisions.append({"period_start": period.start, "period_end": period.end,
                                     "version": version, "segment": segment, "summary": verdict.summary,
                                     "evidence": _evidence(verdict, period, grain, per_year)})
        return
    key = service.open_key(rule.id, version, segment)
    current = alarm_repo.open_alarm_for(session, key)
    if verdict.crossed and current is None:
        service.open_alarm(session, model, rule, version=version, segment=segment, crossed_at=period.end,
                           evidence=_evidence(verdict, period, grain, per_year),
                           summary=f"{rule.name}: {verdict.summary}", now=now)
        report.opened += 1
    elif verdict.crossed is False and current is not None:
        service.auto_resolve(session, model, current, now=now, resolution={
            "reason": "a later period is back within bounds", "period_start": rfc3339(period.start),
            "period_end": rfc3339(period.end), "statistic": verdict.statistic,
            "summary": verdict.summary})
        report.resolved += 1


def evaluate_starvation(session: Session, model: Model, rule: AlarmRule, now: datetime) -> WindowReport:
    """Feed check at every evaluation; opens, or resolves once the feeds are healthy again.

    The outcome-share half needs a horizon: without one, a prediction is never
    mature-without-outcome, so only silence is checked.
    """
    report = WindowReport()
    params = rules.StarvationParams.model_validate(rule.params)
    conn = session.connection()
    versions = alarm_repo.versions_of(conn, model.id)
    last = alarm_repo.last_scored_at(conn, model.id, versions)
    silence = None if last is None else (now - last).total_seconds() / 3600.0
    mature = unlabeled = 0.0
    boundary = query.maturity_boundary(model, now)
    if boundary is not None:
        # The newest mature hour is the one starting at the boundary: the window ends after it.
        end = boundary + timedelta(hours=1)
        days = query.load_days(conn, model, end - timedelta(days=params.window_days), end,
                               segment=(ALL_SEGMENT, ALL_SEGMENT), version=None, boundary=boundary)
        counts = Summary.merge_many(list(days.mature.values())).counts()
        mature, unlabeled = sum(counts.values()), counts["unlabeled"]
    verdict = rules.starvation(silence, mature, unlabeled, params)
    key = service.open_key(rule.id, ALL_VERSIONS, (ALL_SEGMENT, ALL_SEGMENT))
    current = alarm_repo.open_alarm_for(session, key)
    if verdict.crossed and current is None:
        service.open_alarm(session, model, rule, version=ALL_VERSIONS, segment=(ALL_SEGMENT, ALL_SEGMENT),
                           crossed_at=now, summary=f"{rule.name}: {verdict.summary}", now=now,
                           evidence={"statistic": verdict.statistic, "interval": None, "n": verdict.n,
                                     "detail": verdict.detail, "checked_at": rfc3339(now)})
        report.opened += 1
    elif verdict.crossed is False and current is not None:
        service.auto_resolve(session, model, current, now=now,
                             resolution={"reason": "feeds healthy again", "summary": verdict.summary})
        report.resolved += 1
    return report
