"""Sequential calibration charts: route mature cases to streams, design limits, advance, detect crossings.

Each enabled chart rule keeps one risk-adjusted Bernoulli CUSUM (``stats.cusum``)
per (version, segment) stream: "all" plus every declared segment value. A
stream consumes its mature cases in (maturity time, case id) order behind a
watermark; an outcome received after its case was passed by the watermark is
counted as ``skipped_late`` and never fed in out of order. A mature case with
no label (no implicit negatives) is passed over and counted.

Design (docs/methods.md §18): once a stream has ``min_design_cases`` labeled mature
cases, h is designed by the Markov-chain designer from its recent risks for
ARL0 = K × (cases per day) × 365.25 / B_r, K the number of the rule's streams
and B_r the rule's share of the model's false-alarm budget (``alarms.budget``,
``arl0_for_false_alarm_budget``): the rule's charts together then raise about
B_r false alarms a year. The chart starts with the
cases after the design. The design is redone, keeping S, when the target
ARL0 (volume, K) moves by more than ``redesign_rate_ratio`` or the mean risk by
more than ``redesign_mean_change`` (relative), and at every reset.

A crossing opens an alarm for its stream (``records.open_alarm``) unless one is
open; the chart keeps running until a person resolves it, which restarts the
chart at S = 0 (``restart_alarm_stream``).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np

from calibrant.alarms import budget, records
from calibrant.alarms.kinds import calibration_chart, evaluated_as
from calibrant.alarms.kinds.calibration_chart import ChartParams
from calibrant.clock import rfc3339
from calibrant.rollup import outcome_delay
from calibrant.rollup.compute import SegmentBook
from calibrant.stats.cusum import CusumState, new_chart
from calibrant.stats.cusum_design import arl0_for_false_alarm_budget, design_cusum
from calibrant.stats.outcome_delay import DelayDistribution
from calibrant.store import alarm_repo, rollup_repo
from calibrant.store.alarm_tables import Alarm, AlarmRule, ChartStream
from calibrant.store.mature_cases import (
    MatureCases,
    mature_case_windows,
    order_delay,
    outcomes_received_since,
)
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.segments import ALL_SEGMENT

DESIGN_STATES = 200  # Markov states; h moves < 0.002 from 400 states (checked on Beta(2,8) risks)
DESIGN_POINTS = 128  # risk compression bins for the design
PATH_POINTS = 100  # chart points kept for the evidence
_DAY = 86400.0

StreamKey = tuple[str, str, str]  # version, segment key, segment value


@dataclass
class Crossing:
    """A chart crossed h at a case: everything the alarm's evidence needs."""

    rule: AlarmRule
    stream: ChartStream
    crossed_at: datetime
    case_id: str
    evidence: dict[str, Any]


@dataclass
class ChartReport:
    cases: int = 0
    designs: int = 0
    skipped_late: int = 0
    opened: int = 0
    crossings: list[Crossing] = field(default_factory=list)


# ----------------------------------------------------------------------------- recent risks
def _unpack(blob: bytes) -> np.ndarray:
    return np.frombuffer(blob, dtype=np.float64).reshape(2, -1) if blob else np.empty((2, 0))


def _pack(risks: np.ndarray, times: np.ndarray, keep: int) -> bytes:
    return np.ascontiguousarray(np.vstack([risks, times])[:, -keep:]).tobytes()


def cases_per_day(times: np.ndarray) -> float:
    """n / span in days, the span floored at one day (a burst in one hour is not a daily rate)."""
    span = (float(times.max()) - float(times.min())) / _DAY if times.size else 0.0
    return times.size / max(span, 1.0)


PUBLIC_DESIGN_NAMES = {"h": "control_limit", "r_a": "odds_ratio"}


def public_design(design: dict[str, Any] | None) -> dict[str, Any] | None:
    """A stored design as the API shows it: the chart's symbols spelled out."""
    if design is None:
        return None
    return {PUBLIC_DESIGN_NAMES.get(k, k): v for k, v in design.items()}


def design_for(recent: np.ndarray, params: ChartParams, n_charts: int, at: datetime,
               share: float) -> dict[str, Any]:
    """A design dict (``CusumDesign.to_dict`` plus the budget share it serves), or one with ``error``."""
    risks, times = recent
    rate = cases_per_day(times)
    target = arl0_for_false_alarm_budget(rate, n_charts, share)
    base = {"cases_per_day": rate, "n_charts": n_charts, "budget_share_per_year": share,
            "designed_at": rfc3339(at), "mean_risk": float(risks.mean())}
    try:
        design = design_cusum(risks, target, params.odds_ratio, n_states=DESIGN_STATES,
                              max_points=DESIGN_POINTS)
    except ValueError as exc:
        return {**base, "error": str(exc), "target_arl0": target}
    return {**design.to_dict(), **base}


def _material_change(design: dict[str, Any], recent: np.ndarray, params: ChartParams,
                     n_charts: int, share: float) -> bool:
    risks, times = recent
    target = arl0_for_false_alarm_budget(cases_per_day(times), n_charts, share)
    ratio = target / float(design["target_arl0"])
    mean_change = abs(float(risks.mean()) / float(design["mean_risk"]) - 1.0)
    return not (1 / params.redesign_rate_ratio <= ratio <= params.redesign_rate_ratio) or (
        mean_change > params.redesign_mean_change
    )


# ----------------------------------------------------------------------------- one stream
def _epoch(times: list[datetime]) -> np.ndarray:
    return np.array([t.timestamp() for t in times], dtype=np.float64)


def _iso(ts: float) -> str:
    return rfc3339(datetime.fromtimestamp(ts, UTC))


def feed(stream: ChartStream, rule: AlarmRule, params: ChartParams, *, p: np.ndarray, y: np.ndarray,
         times: np.ndarray, case_ids: list[str], n_charts: int, share: float,
         now: datetime, completeness: dict[str, Any] | None = None) -> tuple[Crossing | None, int]:
    """Feed one stream its new labeled mature cases (in order). Returns (crossing, designs made).

    ``n_charts``: the rule's streams now; ``share``: the rule's yearly share of the model's budget;
    ``completeness``: how complete the cases' labels were when read, for the evidence.
    """
    recent = _unpack(stream.recent)
    designs = 0
    start = 0
    if stream.state is None:
        need = max(params.min_design_cases - recent.shape[1], 0)
        start = min(need, p.size)
        recent = np.hstack([recent, np.vstack([p[:start], times[:start]])])[:, -params.design_sample:]
        if recent.shape[1] >= params.min_design_cases:
            stream.design = design_for(recent, params, n_charts, now, share)
            designs += 1
            if "error" not in stream.design:
                stream.state = new_chart(stream.design["h"], params.odds_ratio).to_dict()
        if stream.state is None:  # still gathering, or the design failed: retried next time
            stream.recent = _pack(recent[0], recent[1], params.design_sample)
            return None, designs
    state = CusumState.from_dict(stream.state)
    if (not state.signalled and stream.design and "error" not in stream.design
            and _material_change(stream.design, recent, params, n_charts, share)):
        redesign = design_for(recent, params, n_charts, now, share)
        designs += 1
        if "error" not in redesign:
            stream.design = redesign
            state = replace(state, h=float(redesign["h"]), s=min(state.s, float(redesign["h"])))
    cp, cy, ct = p[start:], y[start:], times[start:]
    step = calibration_chart.decide(state, cp, cy)
    assert step.path is not None  # decide keeps the path: the evidence shows it
    path = list(stream.path or [])
    crossing = None
    if step.signal_index is not None:
        i = step.signal_index
        lo = max(0, i + 1 - PATH_POINTS)
        tail = path[-(PATH_POINTS - (i + 1 - lo)):] if i + 1 - lo < PATH_POINTS else []
        chart_path = tail + [[_iso(ct[j]), float(step.path[j])] for j in range(lo, i + 1)]
        crossed = datetime.fromtimestamp(ct[i], UTC)
        crossing = Crossing(rule, stream, crossed, case_ids[start + i], {
            "statistic": float(step.path[i]),
            "control_limit": state.h,
            "interval": None,
            "n": step.state.signal_case,
            "odds_ratio": state.r_a,
            "crossed_at": rfc3339(crossed),
            "crossing_case": case_ids[start + i],
            "chart_path": chart_path,
            "design": public_design(stream.design),
            "budget_share_per_year": share,
            "skipped_late": stream.skipped_late,
            "unlabeled_at_maturity": stream.unlabeled_at_maturity,
            "cases_since_reset": step.state.n_cases,
            "label_completeness": completeness,
        })
    if step.path is not None and step.path.size:
        k = min(PATH_POINTS, step.path.size)
        path = (path + [[_iso(ct[j]), float(step.path[j])] for j in range(cp.size - k, cp.size)])
    stream.path = path[-PATH_POINTS:]
    stream.state = step.state.to_dict()
    recent = np.hstack([recent, np.vstack([cp, ct])])
    stream.recent = _pack(recent[0], recent[1], params.design_sample)
    return crossing, designs


def restart(stream: ChartStream, params: ChartParams, n_charts: int, now: datetime, share: float) -> None:
    """S back to 0 after a person resolved the alarm; h redesigned for the current risk mix."""
    recent = _unpack(stream.recent)
    if recent.shape[1] >= params.min_design_cases:
        redesign = design_for(recent, params, n_charts, now, share)
        if "error" not in redesign:
            stream.design = redesign
    h = float(stream.design["h"]) if stream.design and "h" in stream.design else None
    stream.state = None if h is None else new_chart(h, params.odds_ratio).to_dict()
    stream.skipped_late = 0
    stream.unlabeled_at_maturity = 0
    stream.path = []
    stream.updated_at = now


# ----------------------------------------------------------------------------- a model
def case_segments(tags: dict[str, str], book: SegmentBook) -> list[tuple[str, str]]:
    """The streams a case belongs to: "all", and each declared segment key it carries a value for."""
    out = [(ALL_SEGMENT, ALL_SEGMENT)]
    for key in book.keys:
        value = tags.get(key, "")
        if value:
            out.append((key, book.resolve(key, value)))
    return out


def chart_rules(session: Session, model: Model) -> list[tuple[AlarmRule, ChartParams]]:
    """The model's enabled chart rules with their parameters."""
    return [(r, ChartParams.model_validate(r.params)) for r in alarm_repo.rules_of(session, model.id)
            if r.enabled and evaluated_as(r.kind, "chart")]


def rule_share(session: Session, model: Model, rule: AlarmRule) -> float:
    """The chart rule's yearly share of the model's budget (a disabled rule: as if it were enabled)."""
    share = budget.share_as_enabled(session, model, rule)
    assert share is not None  # a chart always makes a test
    return share


def restart_alarm_stream(session: Session, model: Model, alarm: Alarm,
                         now: datetime) -> dict[str, Any] | None:
    """A person resolved ``alarm``: if a chart raised it, restart that chart at S = 0 (``restart``).

    Returns the restarted chart's new control limit, or None when the alarm is
    not a chart's (or its rule or stream is gone).
    """
    rule = session.get(AlarmRule, alarm.rule_id)
    if rule is None or not evaluated_as(rule.kind, "chart"):
        return None
    params = ChartParams.model_validate(rule.params)
    mine = alarm_repo.streams_of(session, rule.id)
    share = rule_share(session, model, rule)
    restarted = None
    for stream in mine:
        if (stream.version, stream.segment_key, stream.segment_value) == (
                alarm.version, alarm.segment_key, alarm.segment_value):
            restart(stream, params, max(len(mine), 1), now, share)
            restarted = {"control_limit": (stream.state or {}).get("h")}
    return restarted


def run(session: Session, model: Model, now: datetime) -> ChartReport:
    """Advance every stream of the model's enabled chart rules up to ``now``; open an alarm per crossing.

    Cases are read one maturity window at a time (``store.mature_cases``), so a new
    rule on a long history holds one window's cases, not the history. A rule's
    budget share is divided among its streams counted when a stream is designed.
    """
    report = ChartReport()
    rules = chart_rules(session, model)
    if not rules:
        return report
    reading = Reading.of(model, outcome_delay.stored(model))
    split = budget.of_model(session, model)
    shares = {r.id: split.share_of(r.name) or 0.0 for r, _ in rules}
    conn = session.connection()
    book = SegmentBook(list(model.segment_keys or []), rollup_repo.segment_values(conn, model.id))
    streams: dict[tuple[int, StreamKey], ChartStream] = {
        (r.id, (s.version, s.segment_key, s.segment_value)): s
        for r, _ in rules for s in alarm_repo.streams_of(session, r.id)
    }
    for version in alarm_repo.versions_of(conn, model.id):
        mine = [s for (_, k), s in streams.items() if k[0] == version]
        has_all = all((r.id, (version, ALL_SEGMENT, ALL_SEGMENT)) in streams for r, _ in rules)
        marks = [s.watermark_at for s in mine]
        # Read from the oldest watermark of the version's streams; a rule without its
        # "all" stream yet (new rule, new version) reads the whole history.
        after = min(marks) if has_all and marks and None not in marks else None  # type: ignore[type-var]
        _count_late(session, model, version, streams, book, now)
        if reading.wait is None:  # no horizon and no p95 delay yet: hold every stream where it is
            continue
        for cases in mature_case_windows(conn, model, version, after=after, now=now, wait=reading.wait):
            _advance_window(session, version, cases, rules, streams, book, shares, now, report, reading)
    session.flush()
    for crossing in report.crossings:
        report.opened += _open_alarm(session, model, crossing, now) is not None
    return report


def _open_alarm(session: Session, model: Model, crossing: Crossing, now: datetime) -> Alarm | None:
    stream = crossing.stream
    return records.open_alarm(
        session, model, crossing.rule, version=stream.version,
        segment=(stream.segment_key, stream.segment_value), crossed_at=crossing.crossed_at,
        evidence=crossing.evidence, now=now,
        summary=f"{crossing.rule.name}: chart crossed h = {crossing.evidence['control_limit']:.3f} "
                f"at case {crossing.case_id!r} (S = {crossing.evidence['statistic']:.3f})")


@dataclass(frozen=True)
class Reading:
    """How a model's charts read cases given its measured outcome delay (docs/methods.md §23).

    ``wait``: how long after maturity (``store.mature_cases``) a case is held back: until it
    is complete (``outcome_delay.extra_wait``). None — a model without a horizon whose p95
    delay is not measured yet — means the charts read nothing: their watermarks stay, and
    once the delay is measured they read from where they stopped, in order, skipping nothing.
    ``reported``: with a horizon and implicit negatives, the share of events already reported
    at a case's age, F(age); an unreported event reads as a 0, so under calibration
    P(y read = 1) = p · F(age), and the chart is fed that risk (reporting-delay adjustment,
    Lawless 1994). ``by_class``: without a horizon, the events' and the non-events' delay
    distributions (F₁, F₀). The chart reads only the cases labeled by their age a, and by
    Bayes' rule under calibration P(y = 1 | labeled by a) = p F₁(a) / (p F₁(a) + (1 − p) F₀(a)):
    when non-events report more slowly, the labels read lean towards events, and the chart is
    fed that risk. Used once each class has ``MIN_REPORTS_FOR_P95`` reports. Neither: the risk
    is p as it stands. ``shown``: the distribution whose F at the cases' ages the evidence
    reports (the reports' own without a horizon).
    """

    model: Model
    wait: timedelta | None
    complete_after_days: float | None
    reported: DelayDistribution | None
    shown: DelayDistribution | None = None
    by_class: tuple[DelayDistribution, DelayDistribution] | None = None

    @classmethod
    def of(cls, model: Model, delay: outcome_delay.OutcomeDelay | None) -> Reading:
        complete = outcome_delay.complete_after(model, delay)
        events = delay.events if delay is not None else None
        has_horizon = model.outcome_horizon_days is not None
        adjust = bool(model.implicit_negatives) and has_horizon
        shown = events if adjust else (delay.reports if delay is not None and not has_horizon else None)
        by_class = None
        if not has_horizon and delay is not None and events is not None and delay.non_events is not None and (
                min(events.n, delay.non_events.n) >= outcome_delay.MIN_REPORTS_FOR_P95):
            by_class = (events, delay.non_events)
        return cls(model, outcome_delay.extra_wait(model, delay),
                   None if complete is None else complete / timedelta(days=1),
                   events if adjust else None, shown, by_class)

    def risks(self, p: np.ndarray, matured: list[datetime], now: datetime) -> tuple[np.ndarray, np.ndarray]:
        """(risk the chart is fed, F at each case's age): p · F(age), the labeled-by-age risk, or p."""
        if self.shown is None:
            return p, np.ones(p.size)
        # scored_at lies in the hour ending at matured_at − D: its middle is close enough for F
        age = ((now.timestamp() - _epoch(matured)) / _DAY + order_delay(self.model) / timedelta(days=1)
               + 1.0 / 48.0)
        f = self.shown.at(age)
        if self.reported is not None:
            return p * f, f
        if self.by_class is not None:
            seen_event, seen_non_event = p * self.by_class[0].at(age), (1.0 - p) * self.by_class[1].at(age)
            total = seen_event + seen_non_event
            return np.where(total > 0, seen_event / np.where(total > 0, total, 1.0), p), f
        return p, f

    def evidence(self, f: np.ndarray) -> dict[str, Any]:
        return {"complete_after_days": self.complete_after_days,
                "wait_after_maturity_days": None if self.wait is None else self.wait / timedelta(days=1),
                "mean_reported_share": float(f.mean()) if f.size else None,
                "risk_adjusted_for_delay": self.reported is not None or self.by_class is not None}


def _advance_window(session: Session, version: str, cases: MatureCases,
                    rules: list[tuple[AlarmRule, ChartParams]],
                    streams: dict[tuple[int, StreamKey], ChartStream], book: SegmentBook,
                    shares: dict[int, float], now: datetime, report: ChartReport,
                    reading: Reading) -> None:
    """Route one window's cases to their streams (creating new ones) and feed each stream."""
    routes: dict[StreamKey, list[int]] = {}
    for i, tags in enumerate(cases.tags):
        for seg in case_segments(tags, book):
            routes.setdefault((version, *seg), []).append(i)
    work: list[tuple[AlarmRule, ChartParams, ChartStream, list[int]]] = []
    for key, idx in routes.items():
        for rule, params in rules:
            stream = streams.get((rule.id, key))
            if stream is None:
                stream = ChartStream(rule_id=rule.id, version=key[0], segment_key=key[1],
                                     segment_value=key[2], consumed=0, skipped_late=0,
                                     unlabeled_at_maturity=0, recent=b"", path=[], updated_at=now)
                session.add(stream)
                streams[(rule.id, key)] = stream
            work.append((rule, params, stream, idx))
    per_rule = Counter(rule_id for rule_id, _ in streams)
    for rule, params, stream, idx in work:
        fresh = [i for i in idx if stream.watermark_at is None
                 or (cases.matured_at[i], cases.case_id[i]) > (stream.watermark_at, stream.watermark_case)]
        if not fresh:
            continue
        labels = cases.label[fresh]
        keep = [i for i, lab in zip(fresh, labels, strict=True) if lab >= 0]
        stream.unlabeled_at_maturity += len(fresh) - len(keep)
        last = fresh[-1]
        stream.watermark_at, stream.watermark_case = cases.matured_at[last], cases.case_id[last]
        stream.consumed += len(fresh)
        stream.updated_at = now
        report.cases += len(fresh)
        if not keep:
            continue
        matured = [cases.matured_at[i] for i in keep]
        risk, reported = reading.risks(cases.probability[keep], matured, now)
        crossing, designs = feed(
            stream, rule, params, p=risk, y=cases.label[keep].astype(np.float64),
            times=_epoch(matured), case_ids=[cases.case_id[i] for i in keep],
            n_charts=per_rule[rule.id], share=shares[rule.id], now=now,
            completeness=reading.evidence(reported))
        report.designs += designs
        if crossing is not None:
            report.crossings.append(crossing)


def _count_late(session: Session, model: Model, version: str,
                streams: dict[tuple[int, StreamKey], ChartStream], book: SegmentBook, now: datetime) -> None:
    """Outcomes received since a stream's last run whose case lies at or behind its watermark."""
    mine = [s for (_, k), s in streams.items() if k[0] == version and s.watermark_at is not None]
    if not mine:
        return
    since = min(s.updated_at for s in mine)
    late = outcomes_received_since(session.connection(), model, version, since)
    for stream in mine:
        for item in late:
            if item.received_at > stream.updated_at and (
                (item.matured_at, item.case_id) <= (stream.watermark_at, stream.watermark_case)
            ) and (
                (stream.segment_key, stream.segment_value) in case_segments(item.tags, book)
            ):
                stream.skipped_late += 1
        stream.updated_at = now  # counted up to now: the next run looks only at later arrivals
