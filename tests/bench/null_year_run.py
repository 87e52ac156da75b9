"""One simulated model through the model's default rules, judged by the rules' own decision code.

The rules are ``alarms.kinds.DEFAULT_RULES``, all enabled, with their shares of
the model's budget from ``alarms.budget.split``. Each is judged the way its
evaluation runs in the service:

* window rules (``alarms.windows``): each closed ISO week once it is mature
  (its end + H + L has passed; judged at the next hourly run, with the
  outcomes arrived by then), on every (version, segment) stream with a
  prediction in it — "all" and each segment value — at the level
  ``budget.per_test_level(share, 365.25 / 7, streams live that week)``; the
  kind's ``decide(params, period, level)`` gives the verdict; an alarm opens
  when it crosses and none is open for that stream, and resolves when the
  stream is judged within bounds;
* chart rules (``alarms.charts``): ``null_year_charts.run_chart`` per stream;
* the feed rule (``alarms.feeds``): ``null_year_feed.feed_openings``, every hour.

The reference is a traffic reference: the first ``reference_weeks`` weeks of
version 0, every segment. Window rules judge the weeks after it; each rule
covers the same ``judged_weeks`` of scored traffic: the weeks judged, the cases
the charts consume that were scored in them (they mature H + L later), and the
feed's windows ending in them. The reference's outcomes are taken as they
stand when the first week is judged (the few outcomes later than that, ~0.1 %
of its cases, are not added afterwards; the service would add them).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from tests.bench.null_year_charts import DesignTable, StreamCases, run_chart
from tests.bench.null_year_feed import feed_openings
from tests.bench.null_year_traffic import (
    SEGMENT_KEY,
    SEGMENT_VALUES,
    Cases,
    YearSpec,
    label_state,
    matured_at,
    simulate,
)
from tests.bench.null_year_window import SimModel, SimPeriod, references

from calibrant.alarms.budget import RuleEntry, per_test_level, split
from calibrant.alarms.kinds import DEFAULT_RULES, spec
from calibrant.alarms.kinds.base import EVALUATIONS_PER_YEAR, ChartKind, FeedKind, KindSpec, WindowKind
from calibrant.stats.summary import Summary

ALL = "all"
_HOUR = 1.0 / 24.0
_WEEK = 7.0


@dataclass(frozen=True, slots=True)
class Rule:
    """A default rule as the bench runs it: kind, validated parameters, yearly share (None: outside)."""

    name: str
    kind: str
    spec: KindSpec
    params: Any
    share: float | None


def default_rules(per_year: float = 1.0) -> list[Rule]:
    """``DEFAULT_RULES`` with their shares of a budget of ``per_year`` false alarms (``budget.split``)."""
    entries = [RuleEntry(name, str(kind), dict(params), True) for name, kind, params in DEFAULT_RULES]
    shares = split(per_year, entries)
    out = []
    for name, kind, params in DEFAULT_RULES:
        kind_spec = spec(str(kind))
        out.append(Rule(name, str(kind), kind_spec, kind_spec.params.model_validate(dict(params)),
                        shares.share_of(name)))
    return out


@dataclass(frozen=True, slots=True)
class Timeline:
    """Reference weeks, then the judged weeks; ``until_day`` stops every evaluation early (power runs)."""

    reference_weeks: int = 8
    judged_weeks: int = 52
    until_day: float | None = None

    @property
    def start(self) -> float:
        return _WEEK * self.reference_weeks

    @property
    def end(self) -> float:
        return self.start + _WEEK * self.judged_weeks


@dataclass(frozen=True, slots=True)
class Opening:
    """An alarm opened on ``day`` by ``rule`` for (version, segment); ``about``: scored day it concerns."""

    rule: str
    version: int
    segment: str
    day: float
    about: float


@dataclass
class RunResult:
    openings: list[Opening] = field(default_factory=list)
    verdicts: Counter[tuple[str, str]] = field(default_factory=Counter)  # (rule, crossed/within/not judged)
    designs: int = 0
    cases: int = 0


def stream_names() -> list[str]:
    return [ALL, *(f"{SEGMENT_KEY}={v}" for v in SEGMENT_VALUES)]


def run(spec_: YearSpec, seed: int | np.random.SeedSequence, rules: list[Rule], table: DesignTable,
        timeline: Timeline, *, feed: bool = True) -> RunResult:
    """Simulate ``spec_`` and judge it with ``rules`` (module docstring)."""
    rng = np.random.default_rng(seed)
    cases = simulate(spec_, rng)
    result = RunResult(cases=len(cases))
    out = spec_.outcomes
    model = SimModel(out.implicit, out.horizon_days, out.lag_days)
    until = timeline.until_day if timeline.until_day is not None else timeline.end + out.maturity_days + 1.0
    window_rules = [r for r in rules if isinstance(r.spec, WindowKind)]
    if window_rules:
        _judge_weeks(cases, window_rules, model, timeline, until, result)
    for rule in rules:
        if isinstance(rule.spec, ChartKind):
            assert rule.share is not None  # a chart always makes a test
            _run_charts(cases, rule, spec_, table, timeline, until, result)
        elif isinstance(rule.spec, FeedKind) and feed and rule.share is not None:
            level = per_test_level(rule.share, EVALUATIONS_PER_YEAR["day"] * 24.0, 1)
            first, last = timeline.start + out.maturity_days, timeline.end + out.maturity_days
            days = feed_openings(rule.spec, rule.params, cases, out, level, first, min(last, until))
            result.openings += [Opening(rule.name, -1, ALL, d, d - out.maturity_days) for d in days]
    return result


def _stream_summaries(week: Cases, now: float) -> dict[tuple[int, str], Summary]:
    """Each (version, segment) stream's summary of a week's cases, labels as of ``now``; "all" merged."""
    state = label_state(week, now)
    names = stream_names()
    out: dict[tuple[int, str], Summary] = {}
    for version in np.unique(week.version):
        parts = []
        for s in range(len(SEGMENT_VALUES)):
            idx = np.flatnonzero((week.version == version) & (week.segment == s))
            if idx.size:
                summary = Summary.from_arrays(week.p[idx], state[idx])
                out[(int(version), names[s + 1])] = summary
                parts.append(summary)
        out[(int(version), ALL)] = Summary.merge_many(parts)
    return out


def _judge_weeks(cases: Cases, rules: list[Rule], model: SimModel, timeline: Timeline, until: float,
                 result: RunResult) -> None:
    for rule in rules:
        if rule.params.granularity != "week":
            raise ValueError(f"the bench judges weekly window rules; {rule.name} is per "
                             f"{rule.params.granularity}")
    delay = model.outcome_horizon_days + model.outcome_lag_days
    weeks = timeline.reference_weeks + timeline.judged_weeks
    edges = np.searchsorted(cases.scored, _WEEK * np.arange(weeks + 1))
    first_judged = _WEEK * (timeline.reference_weeks + 1) + delay + _HOUR
    ref = cases.take(np.flatnonzero(cases.version[: edges[timeline.reference_weeks]] == 0))
    ref_state = label_state(ref, first_judged)
    # A traffic reference per segment stream, as alarms.windows.references_of reads it; every
    # reference case is mature by the first judged week.
    names = stream_names()
    refs = {ALL: references(*[Summary.from_arrays(ref.p, ref_state)] * 2, model)}
    for s in range(len(SEGMENT_VALUES)):
        idx = np.flatnonzero(ref.segment == s)
        summary = Summary.from_arrays(ref.p[idx], ref_state[idx])
        refs[names[s + 1]] = references(summary, summary, model)
    is_open: set[tuple[str, int, str]] = set()
    for w in range(timeline.reference_weeks, timeline.reference_weeks + timeline.judged_weeks):
        now = _WEEK * (w + 1) + delay + _HOUR  # the first hourly run after end + H + L
        if now > until:
            break
        week = cases.take(np.arange(edges[w], edges[w + 1]))
        live = {k: s for k, s in _stream_summaries(week, now).items() if not s.is_empty()}
        periods = {k: SimPeriod(s, _WEEK * w, _WEEK * (w + 1), model, refs[k[1]]) for k, s in live.items()}
        for rule in rules:
            kind = rule.spec
            assert isinstance(kind, WindowKind)
            level = 0.0 if rule.share is None else per_test_level(
                rule.share, EVALUATIONS_PER_YEAR["week"], len(live))
            for (version, segment), period in periods.items():
                verdict = kind.decide(rule.params, period, level)
                key = (rule.name, version, segment)
                status = {True: "crossed", False: "within", None: "not judged"}[verdict.crossed]
                result.verdicts[(rule.name, status)] += 1
                if verdict.crossed and key not in is_open:
                    is_open.add(key)
                    result.openings.append(Opening(rule.name, version, segment, now, _WEEK * w))
                elif verdict.crossed is False:
                    is_open.discard(key)


def _run_charts(cases: Cases, rule: Rule, spec_: YearSpec, table: DesignTable, timeline: Timeline,
                until: float, result: RunResult) -> None:
    out = spec_.outcomes
    matured = matured_at(cases.scored, out)
    label = np.where(cases.arrival <= matured, cases.y, 0 if out.implicit else -1).astype(np.int8)
    names = stream_names()
    streams: dict[tuple[int, str], np.ndarray] = {}
    for version in np.unique(cases.version):
        mine = cases.version == version
        streams[(int(version), ALL)] = np.flatnonzero(mine)
        for s in range(len(SEGMENT_VALUES)):
            idx = np.flatnonzero(mine & (cases.segment == s))
            if idx.size:
                streams[(int(version), names[s + 1])] = idx
    born = np.sort([matured[idx[0]] for idx in streams.values()])

    def n_charts(day: float) -> int:
        """The rule's streams that exist when the day's cases are read (created as cases reach them)."""
        return int(np.searchsorted(born, day + 1.0, side="left"))

    lo, hi = timeline.start + out.maturity_days, timeline.end + out.maturity_days
    for (version, segment), idx in streams.items():
        chart = run_chart(StreamCases(matured[idx], cases.p[idx], label[idx]), rule.params, spec_.mix,
                          float(rule.share or 0.0), n_charts, table, min(hi, until))
        result.designs += chart.designs
        result.openings += [Opening(rule.name, version, segment, d, d - out.maturity_days)
                            for d in chart.crossings if lo <= d < hi]
