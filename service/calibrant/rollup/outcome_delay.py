"""A model's measured outcome delay, how complete each period's labels are, and when a case is complete.

Delay of a reported case: its first report (``first_observed_at``) minus its
earliest ``scored_at``. The distribution is measured from the cases scored in
the last ``MAX_DELAY_DAYS`` that reported, with the product-limit estimator for
right-truncated data (``stats.outcome_delay``, docs/methods.md §23): a case
scored T days ago can only show a delay ≤ T, and cases still waiting do not
pull the estimate short. Which reports count:

* with implicit negatives, only events report (a non-event never does), so the
  distribution is that of the events' delays;
* otherwise every label reports, and the distribution is of all of them; the
  events' own distribution is kept beside it for the late-event share, and the
  non-events' for the charts of a model without a horizon (``charts.Reading``).

An event counts as one only if it happened inside the horizon: an outcome of 1
whose ``occurred_at`` lies after scored_at + H is a 0 (``counts_as_event``). An
event reported after H + L is a *late event*; its share is 1 − F_events(H + L).

Label completeness of a period (``period_state``): the estimated share of its
eventual reports already in, Σ_d w_d · mean_h F(now − t_dh) / Σ_d w_d over the
period's days d and hours h, w_d the day's expected reports (Σ p with implicit
negatives, the count of predictions otherwise) — ages within a day taken at its
24 hour midpoints.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np

from calibrant.clock import rfc3339
from calibrant.rollup.query import DaySlices
from calibrant.stats.outcome_delay import DelayDistribution, delay_grid, right_truncated_cdf
from calibrant.stats.summary import Summary
from calibrant.store import delay_repo
from calibrant.store.tables import Model
from calibrant.store.unit import Connection

MAX_DELAY_DAYS = 180  # the look-back: delays longer than this are not measured
LATE_SHARE_TO_WAIT = 0.02  # above this late-event share the rules wait for the p95 delay
# Without a horizon the wait is the p95 delay itself, trusted from this many reports: the
# smallest sample whose 95 % point lies inside the observations, n ≥ 1 / (1 − 0.95) (ours).
MIN_REPORTS_FOR_P95 = 20
PROVISIONAL_BELOW = 0.95  # a period whose label completeness is below this is provisional
REMEASURE_AFTER = timedelta(hours=1)  # the alarms job measures a model at most this often
BY_WEEK_WEEKS = 12
QUANTILES = {"p50": 0.5, "p90": 0.9, "p95": 0.95, "p99": 0.99}
_DAY_S = 86400.0
_HOUR_MIDPOINTS = (np.arange(24) + 0.5) / 24.0  # fractions of a day


@dataclass(frozen=True, slots=True)
class OutcomeDelay:
    measured_at: datetime
    reports: DelayDistribution  # the reports that count (see the module docstring)
    events: DelayDistribution | None  # events only; None when no event reported
    late_event_share: float | None  # None without a horizon, or without events
    late_events: int  # events seen reported after H + L in the look-back
    by_week: list[dict[str, Any]]
    non_events: DelayDistribution | None = None  # explicit outcomes only; None when none reported

    def quantiles_days(self) -> dict[str, float]:
        return {name: round(self.reports.quantile(q), 4) for name, q in QUANTILES.items()}

    def to_json(self) -> dict[str, Any]:
        return {
            "measured_at": rfc3339(self.measured_at),
            "reports": _dist_json(self.reports),
            "events": None if self.events is None else _dist_json(self.events),
            "late_event_share": self.late_event_share,
            "late_events": self.late_events,
            "by_week": self.by_week,
            "non_events": None if self.non_events is None else _dist_json(self.non_events),
        }

    @classmethod
    def from_json(cls, doc: dict[str, Any]) -> OutcomeDelay:
        return cls(
            measured_at=datetime.fromisoformat(doc["measured_at"]),
            reports=_dist_from(doc["reports"]),
            events=None if doc["events"] is None else _dist_from(doc["events"]),
            late_event_share=doc["late_event_share"],
            late_events=int(doc["late_events"]),
            by_week=list(doc["by_week"]),
            non_events=None if doc.get("non_events") is None else _dist_from(doc["non_events"]),
        )


def _dist_json(dist: DelayDistribution) -> dict[str, Any]:
    return {"n": dist.n, "cdf": [round(float(v), 7) for v in dist.cdf]}


def _dist_from(doc: dict[str, Any]) -> DelayDistribution:
    return DelayDistribution(grid=delay_grid(MAX_DELAY_DAYS), cdf=np.asarray(doc["cdf"], dtype=np.float64),
                             n=int(doc["n"]))


def horizon_and_lag(model: Model) -> timedelta | None:
    if model.outcome_horizon_days is None:
        return None
    return timedelta(days=model.outcome_horizon_days + (model.outcome_lag_days or 0))


def counts_as_event(label: np.ndarray, scored: np.ndarray, occurred: np.ndarray,
                    horizon_days: int | None) -> np.ndarray:
    """Label 1, and (with a horizon H) not known to have happened after scored + H (epoch seconds)."""
    event = label == 1
    if horizon_days is not None:
        event &= ~(occurred > scored + horizon_days * _DAY_S)  # NaN (not sent) compares False
    return event


def measure(conn: Connection, model: Model, now: datetime) -> OutcomeDelay | None:
    """The model's delay distribution from its reported cases; None when none reported yet."""
    since = now - timedelta(days=MAX_DELAY_DAYS)
    rows = delay_repo.reported_since(conn, model.id, since)
    now_s = now.timestamp()
    delay = np.maximum(rows.first_observed - rows.scored, 0.0) / _DAY_S
    waited = np.maximum(now_s - rows.scored, 0.0) / _DAY_S
    event = counts_as_event(rows.label, rows.scored, rows.occurred, model.outcome_horizon_days)
    counted = event if model.implicit_negatives else np.ones(event.size, dtype=bool)
    reports = right_truncated_cdf(delay[counted], waited[counted], max_days=MAX_DELAY_DAYS)
    if reports is None:
        return None
    events = right_truncated_cdf(delay[event], waited[event], max_days=MAX_DELAY_DAYS)
    non_events = None
    if not model.implicit_negatives:
        non_events = right_truncated_cdf(delay[~event], waited[~event], max_days=MAX_DELAY_DAYS)
    wait = horizon_and_lag(model)
    late = np.zeros(event.size, dtype=bool)
    share = None
    if wait is not None:
        late = event & (delay > wait / timedelta(days=1))
        if events is not None:
            share = round(float(1.0 - events.at(wait / timedelta(days=1))), 5)
    return OutcomeDelay(now, reports, events, share, int(late.sum()),
                        _by_week(rows.scored, delay, event, late, now), non_events)


def _by_week(scored: np.ndarray, delay: np.ndarray, event: np.ndarray, late: np.ndarray,
             now: datetime) -> list[dict[str, Any]]:
    """Per ISO week of scoring (the last ``BY_WEEK_WEEKS``): what has reported so far."""
    today = now.astimezone(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
    monday = today - timedelta(days=today.weekday())
    out = []
    for k in range(BY_WEEK_WEEKS - 1, -1, -1):
        lo = monday - timedelta(weeks=k)
        mask = (scored >= lo.timestamp()) & (scored < (lo + timedelta(weeks=1)).timestamp())
        out.append({
            "week_start": rfc3339(lo),
            "reported": int(mask.sum()),
            "events": int((mask & event).sum()),
            "late_events": int((mask & late).sum()),
            "median_days_so_far": round(float(np.median(delay[mask])), 4) if mask.any() else None,
        })
    return out


def stored(model: Model) -> OutcomeDelay | None:
    return None if model.outcome_delay is None else OutcomeDelay.from_json(model.outcome_delay)


def refresh(conn: Connection, model: Model, now: datetime) -> OutcomeDelay | None:
    """Measure again when the stored measure is older than ``REMEASURE_AFTER``; keep it on the model."""
    current = stored(model)
    if current is not None and now - current.measured_at < REMEASURE_AFTER:
        return current
    fresh = measure(conn, model, now)
    if fresh is not None:
        model.outcome_delay = fresh.to_json()
    return fresh if fresh is not None else current


def complete_after(model: Model, delay: OutcomeDelay | None) -> timedelta | None:
    """The age at which a case is complete for the rules.

    With a horizon: H + L, or max(H + L, p95 delay) when the late-event share
    exceeds ``LATE_SHARE_TO_WAIT``. Without one: the p95 delay, None until it is measured
    from at least ``MIN_REPORTS_FOR_P95`` reported cases.
    """
    wait = horizon_and_lag(model)
    p95 = None if delay is None else timedelta(days=delay.reports.quantile(0.95))
    if wait is None:
        return p95 if delay is not None and delay.reports.n >= MIN_REPORTS_FOR_P95 else None
    share = None if delay is None else delay.late_event_share
    if p95 is not None and share is not None and share > LATE_SHARE_TO_WAIT:
        return max(wait, p95)
    return wait


def extra_wait(model: Model, delay: OutcomeDelay | None) -> timedelta | None:
    """How long after its maturity (``store.mature_cases``) a chart reads a case: until it is complete.

    Maturity is the end of the scored hour + H + L, or + L without a horizon, so the wait is
    ``complete_after`` − (H + L), or max(p95 − L, 0) without a horizon. None: no horizon and
    the p95 delay not measured yet (the charts read nothing until it is).
    """
    complete = complete_after(model, delay)
    if complete is None:
        return None
    order = timedelta(days=(model.outcome_horizon_days or 0) + (model.outcome_lag_days or 0))
    return max(complete - order, timedelta(0))


def completeness(delay: DelayDistribution, weights: dict[datetime, float], now: datetime) -> float | None:
    """Σ_d w_d · mean_h F(now − t_dh) / Σ_d w_d over days d (their hour midpoints t_dh ≤ now)."""
    days = [d for d, w in weights.items() if w > 0]
    if not days:
        return None
    w = np.array([weights[d] for d in days])
    starts = np.array([(now - d).total_seconds() / _DAY_S for d in days])  # age of the day's start
    ages = starts[:, None] - _HOUR_MIDPOINTS[None, :]
    f = np.where(ages >= 0, delay.at(np.maximum(ages, 0.0)), np.nan)
    per_day = np.nanmean(np.where(np.isnan(f).all(axis=1, keepdims=True), 0.0, f), axis=1)
    return float(np.sum(w * per_day) / np.sum(w))


@dataclass(frozen=True, slots=True)
class PeriodState:
    label_completeness: float | None
    provisional: bool
    provisional_reason: str | None


def _expected_reports(summary: Summary, implicit_negatives: bool) -> float:
    return summary.field_total("s1") if implicit_negatives else summary.field_total("n")


def period_state(model: Model, delay: OutcomeDelay | None, days: DaySlices, start: datetime,
                 end: datetime, now: datetime) -> PeriodState:
    """Completeness of the period's labels and whether its label metrics are provisional."""
    implicit = bool(model.implicit_negatives)
    weights: dict[datetime, float] = {}
    immature = 0.0
    for part in (days.mature, days.immature):
        for d, summary in part.items():
            if start <= d < end:
                weights[d] = weights.get(d, 0.0) + _expected_reports(summary, implicit)
    for d, summary in days.immature.items():
        if start <= d < end:
            immature += summary.field_total("n")
    if not any(w > 0 for w in weights.values()):
        return PeriodState(None, False, None)
    level = completeness(delay.reports, weights, now) if delay is not None else None
    reasons = []
    if immature > 0:
        reasons.append(f"{round(immature)} predictions are still inside horizon + lag")
    if level is None:
        if model.outcome_horizon_days is None:
            reasons.append("no outcome delay measured yet (no outcome reported)")
    elif level < PROVISIONAL_BELOW:
        reasons.append(f"an estimated {level:.1%} of this period's outcomes are reported "
                       f"(provisional below {PROVISIONAL_BELOW:.0%})")
    return PeriodState(None if level is None else round(level, 5), bool(reasons),
                       "; ".join(reasons) if reasons else None)
