"""Window rules, judged once per closed, mature period.

A period (UTC day, ISO week or month) is evaluated when it has ended, every
bucket in it is mature (end + H + L < now) and no bucket of it waits for the
rollup. Each is evaluated once per (version, segment) stream — "all" and
every declared segment value — and the rule remembers how far it got
(``evaluated_through``), so backfilled history is evaluated the same way the
first time the rule runs. The rule's kind judges the period (its spec's
``decide``) at the per-test level its share of the model's false-alarm budget
gives: α = share / (periods a year) / (streams with a prediction in the period)
(``alarms.budget``); a firing stream opens an alarm unless one is open; a stream
judged within bounds resolves its open alarm; too little data leaves an open
alarm as it is.

Excess log-loss is judged on the period's mature rows and on the reference's
mature rows, both counted the model's way: with implicit negatives a mature
prediction without an outcome is a 0 in both. A traffic reference is read per
segment stream, so a segment value is compared with its own past rather than
with the pooled mix of all values (an uploaded set has no tags and serves all).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from calibrant.alarms import kinds, records
from calibrant.alarms.budget import per_test_level
from calibrant.alarms.kinds.base import EVALUATIONS_PER_YEAR, Decision, WindowKind
from calibrant.clock import rfc3339
from calibrant.rollup import outcome_delay, query
from calibrant.rollup.periods import Granularity, Period, periods
from calibrant.rollup.references import reference_outcome_summary, reference_summary
from calibrant.stats.result import Estimate
from calibrant.stats.summary import Summary
from calibrant.stats.window_tests import LogLossSums, log_loss_sums
from calibrant.store import alarm_repo, rollup_repo
from calibrant.store.alarm_tables import AlarmRule
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.segments import ALL_SEGMENT

MAX_PERIODS_PER_RUN = 60


@dataclass
class WindowReport:
    periods: int = 0
    opened: int = 0
    resolved: int = 0
    decisions: list[dict[str, Any]] = field(default_factory=list)  # for backtests


def ready(model: Model, period: Period, now: datetime,
          delay: outcome_delay.OutcomeDelay | None = None) -> bool:
    """Closed and complete: its last case's age exceeds ``outcome_delay.complete_after``.

    With a horizon that is H + L (or the p95 delay when late events are common), strict as
    ``load_days``; without one the measured p95 delay, or the period's end while none is measured.
    """
    complete = outcome_delay.complete_after(model, delay)
    if complete is None:
        return period.end <= now
    return period.end + complete < now if model.outcome_horizon_days is not None else (
        period.end + complete <= now)


def segments_of(session: Session, model: Model) -> list[tuple[str, str]]:
    values = rollup_repo.segment_values(session.connection(), model.id)
    return [(ALL_SEGMENT, ALL_SEGMENT)] + [
        (k, v) for k in (model.segment_keys or []) for v in values.get(k, [])
    ]


class PeriodInputs:
    """One stream's period as a window kind reads it (``kinds.base.WindowInputs``), each part on demand."""

    def __init__(self, model: Model, period: Period, days: query.DaySlices, references: References):
        self._model = model
        self._period = period
        self._days = days
        self._references = references
        self._metrics: dict[str, Estimate] | None = None
        self._summary: Summary | None = None

    @property
    def days(self) -> query.DaySlices:
        return self._days

    def summary(self) -> Summary:
        """The period's mature rows of this stream, merged once."""
        if self._summary is None:
            start, end = self._period.start, self._period.end
            self._summary = Summary.merge_many([s for d, s in self._days.mature.items() if start <= d < end])
        return self._summary

    def log_loss_sums(self) -> LogLossSums:
        return log_loss_sums(self.summary(), bool(self._model.implicit_negatives))

    def reference_log_loss_sums(self) -> LogLossSums | None:
        return self._references.log_loss_sums

    def metric(self, key: str) -> Estimate:
        if self._metrics is None:
            self._metrics = query.period_metrics(self._period, self._days, self._model,
                                                 self._references.scores)
        return self._metrics[key]


@dataclass(frozen=True, slots=True)
class References:
    """The reference twice: every prediction (for score drift), and its mature rows as log-loss sums."""

    scores: Summary | None
    log_loss_sums: LogLossSums | None


def references_of(session: Session, model: Model, now: datetime, segment: tuple[str, str]) -> References:
    """The reference of one segment stream (a traffic reference is read for that segment)."""
    conn = session.connection()
    outcomes = reference_outcome_summary(conn, model, query.maturity_boundary(model, now), segment)
    sums = None
    if outcomes is not None:
        traffic = (model.reference or {}).get("kind") == "traffic"
        sums = log_loss_sums(outcomes, bool(model.implicit_negatives) and traffic)
        sums = sums if sums.n > 0 else None
    return References(scores=reference_summary(conn, model, segment), log_loss_sums=sums)



def evaluate_rule(session: Session, model: Model, rule: AlarmRule, now: datetime, *, share: float | None,
                  start: datetime | None = None, end: datetime | None = None,
                  dry_run: bool = False) -> WindowReport:
    """Evaluate the rule on every ready period not yet evaluated (or, for a backtest, in [start, end)).

    ``share``: the rule's yearly share of the model's false-alarm budget (``alarms.budget.split``);
    None for a rule outside the budget (a hand-set threshold, which makes no test).
    """
    report = WindowReport()
    kind = kinds.spec(rule.kind)
    if not isinstance(kind, WindowKind):
        raise TypeError(f"a {rule.kind} rule is not judged per period")
    params: Any = kind.params.model_validate(rule.params)
    conn = session.connection()
    grain = Granularity(params.granularity)
    first = start or rule.evaluated_through or alarm_repo.first_bucket_hour(conn, model.id)
    if first is None:
        return report
    last = min(end or now, now)
    spans = [p for p in periods(first, last, grain) if p.end <= last]
    if start is not None or rule.evaluated_through is not None:
        spans = [p for p in spans if p.start >= first]
    if not dry_run:
        spans = spans[:MAX_PERIODS_PER_RUN]
    streams = segments_of(session, model)
    # Read each segment's reference once, and only when a period is ready: most job rounds judge
    # nothing, and a traffic reference costs a read of its whole range per segment.
    references: dict[tuple[str, str], References] = {}
    versions = alarm_repo.versions_of(conn, model.id)
    tests_per_year = EVALUATIONS_PER_YEAR[grain.value]
    delay = outcome_delay.stored(model)
    for period in spans:
        if not ready(model, period, now, delay) or alarm_repo.has_dirty_before(conn, model.id, period.end):
            break
        boundary = query.maturity_boundary(model, now)
        live: list[tuple[str, tuple[str, str], PeriodInputs]] = []
        for version in versions:
            for segment in streams:
                days = query.load_days(conn, model, period.start, period.end, segment=segment,
                                       version=version, boundary=boundary)
                if segment not in references:
                    references[segment] = references_of(session, model, now, segment)
                inputs = PeriodInputs(model, period, days, references[segment])
                if not inputs.summary().is_empty():
                    live.append((version, segment, inputs))
        level = None if share is None else per_test_level(share, tests_per_year, len(live))
        for version, segment, inputs in live:
            verdict = kind.decide(params, inputs, 0.0 if level is None else level)
            state = outcome_delay.period_state(model, delay, inputs.days, period.start, period.end, now)
            _apply(session, model, rule, version, segment, period, verdict, (share, level), now,
                   report, dry_run, state)
        report.periods += 1
        if not dry_run:
            rule.evaluated_through = period.end
    session.flush()
    return report


def _evidence(verdict: Decision, period: Period, grain: str,
              budget: tuple[float | None, float | None], state: outcome_delay.PeriodState) -> dict[str, Any]:
    share, level = budget
    return {
        "statistic": verdict.statistic, "interval": list(verdict.interval) if verdict.interval else None,
        "n": verdict.n, "period_start": rfc3339(period.start), "period_end": rfc3339(period.end),
        "granularity": grain, "detail": verdict.detail, "budget_share_per_year": share, "level": level,
        "label_completeness": state.label_completeness,
    }


def _apply(session: Session, model: Model, rule: AlarmRule, version: str, segment: tuple[str, str],
           period: Period, verdict: Decision, budget: tuple[float | None, float | None], now: datetime,
           report: WindowReport, dry_run: bool, state: outcome_delay.PeriodState) -> None:
    grain = rule.params.get("granularity", "week")
    if dry_run:
        if verdict.crossed:
            report.decisions.append({"period_start": period.start, "period_end": period.end,
                                     "version": version, "segment": segment, "summary": verdict.summary,
                                     "evidence": _evidence(verdict, period, grain, budget, state)})
        return
    current = records.open_alarm_of(session, rule, version, segment)
    if verdict.crossed and current is None:
        records.open_alarm(session, model, rule, version=version, segment=segment, crossed_at=period.end,
                           evidence=_evidence(verdict, period, grain, budget, state),
                           summary=f"{rule.name}: {verdict.summary}", now=now)
        report.opened += 1
    elif verdict.crossed is False and current is not None:
        records.auto_resolve(session, model, current, now=now, resolution={
            "reason": "a later period is back within bounds", "period_start": rfc3339(period.start),
            "period_end": rfc3339(period.end), "statistic": verdict.statistic,
            "summary": verdict.summary})
        report.resolved += 1
