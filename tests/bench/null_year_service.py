"""Well-calibrated model-years through the running service, against the bench's simulated decisions.

    .venv/bin/python -m tests.bench.null_year_service [--small] [--years N] [--seed S] [--workers W]
                                                      [--refresh weekly|daily]

tests/bench/null_year.py judges simulated model-years with the default rules'
own decision code; this bench checks that shortcut against the service
itself. Each model-year (``null_year_traffic.simulate``: y ~ Bernoulli(p)
exactly, Beta(2,8) risks, 1,000-2,000 cases a week with ±25 % seasonality,
one segment key ``region`` with three values) is posted through the real
application (``calibrant.app.create_app`` on a fresh, migrated SQLite file,
with an injected ``FixedClock``):

* the model gets its horizon and lag, its segment key and a traffic reference
  on version v0's first 8 weeks (PUT /v1/models/{m}); every default rule stays
  enabled at the default budget of 1 false alarm a year;
* the clock moves one day at a time, to 01:00 UTC; each day posts the cases
  scored since the previous step and the outcomes that arrived by now
  (explicit outcomes: every case's label after a lognormal delay of median 2
  days and σ 0.5, inside the 10-day horizon for all but ~0.06 %; implicit
  negatives: only events, within the 14-day horizon);
* POST /v1/refresh (the rollup, then every alarm evaluation) runs every day
  (``--refresh daily``) or once a week (the default), on the weekday a week's
  window rules become due: a week [7w, 7w + 7) is judged at the first refresh
  after its end + H + L, which is 01:00 of that weekday under both cadences,
  so the window rules judge the same periods with the same outcomes either
  way. The weekly cadence cuts the service's work about 2.5-fold (the rollup
  recomputes an hour's summaries at every refresh that finds new outcomes for
  it; the small run takes 81 s of CPU daily, 33 s weekly) and the charts then
  read their mature cases a week at a time;
* a person resolves each open chart alarm on the next simulated day
  (POST …/alarms/{id}/resolve, which restarts that chart at S = 0);
* the openings are read back from GET /v1/models/{m}/alarms.

The same traffic goes through the bench's decision path: ``null_year_run.run``
re-simulates the year from the same spec and seed (the same arrays; their
count is checked) and each rule's openings are compared, counted as
null_year.py counts them: window rules by the week they judge (one of the
judged weeks after the reference), charts and the feed rule by when they
cross (from the first judged week's cases maturing to the last one's).

* Window rules should agree exactly: same rule, version, segment and week.
  Each service opening's level must be α = share / (365.25 / 7) / (live
  streams) (``alarms.budget.per_test_level``) and its statistic the kind's
  ``decide`` on ``Summary.from_arrays`` of that stream-week (``WeekJudge``).
  At a budget of 1 the window rules open at most ~0.44 alarms a year, so the
  agreement is also checked where it has something to agree on: after the
  year the model's budget is raised to ``REPLAY_BUDGET`` and the window
  rules' effect floors are lowered (``REPLAY_PARAMS``), so that the tests'
  levels decide, and each window rule's backtest (POST …/rules/{rule}/backtest,
  the live evaluation as a dry run) lists every stream-week that crosses;
  ``WeekJudge`` must find the same crossings with the same levels and
  statistics, from the outcomes known by then.
* Charts agree closely, not exactly: the service designs h on each stream's
  own recent risks and reads cases per refresh, the bench interpolates h
  designed on a fixed sample of the risk mix and reads them a day at a time.
* The feed rule is tested hourly by the bench and once per refresh here.

Printed: per year and rule, service openings against simulated openings; every
disagreement with its week and stream; false alarms per model-year from the
service (the openings about the 8 reference weeks, judged against a reference
that contains them, apart); the wall and CPU time. Five years take ~900 s of
CPU (~170 s a year without a second version, ~250 s with one), shared by
the worker processes: a little over 7.5 minutes on two idle cores.
``--small`` runs one quarter-year (8 reference weeks, 13 judged) at 500 cases
a week, ~35 s; a whole year at that volume takes ~2 minutes of CPU.
tests/bench/test_null_year_service_small.py runs the small configuration and
asserts it.
"""

from __future__ import annotations

import argparse
import math
import multiprocessing
import tempfile
import time
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field, replace
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from fastapi.testclient import TestClient
from tests.bench.null_year_charts import DesignTable
from tests.bench.null_year_run import ALL, Rule, Timeline, default_rules, run, stream_names
from tests.bench.null_year_traffic import (
    IMPLICIT,
    SEGMENT_KEY,
    SEGMENT_VALUES,
    Cases,
    Outcomes,
    YearSpec,
    label_state,
    simulate,
)
from tests.bench.null_year_window import DAY_ZERO, SimModel, SimPeriod, SimReferences, instant, references
from threadpoolctl import threadpool_limits

from calibrant.alarms.budget import per_test_level
from calibrant.alarms.kinds.base import EVALUATIONS_PER_YEAR, ChartKind, Decision, FeedKind, WindowKind
from calibrant.app import create_app
from calibrant.clock import FixedClock, rfc3339
from calibrant.config import Settings
from calibrant.stats.summary import Summary
from calibrant.store import migrate
from calibrant.store.engine import make_engine

MODEL = "null-year"
BUDGET = 1.0
# The replay after the year: a budget 200 times the default, the window rules' effect floors
# lowered and their minimum data down to 50 cases (every stream judged, the smallest too), so
# that the tests' levels (up to ~0.2 a stream-week) decide and a calibrated year gives dozens of
# crossings to agree on; at the default floors it gives almost none at any level.
REPLAY_BUDGET = 200.0
REPLAY_PARAMS: dict[str, dict[str, float]] = {
    "excess-log-loss-weekly": {"min_relative_effect": 0.0, "min_labeled": 50},
    "calibration-slope-weekly": {"lower": 0.99, "upper": 1.01, "min_labeled": 50},
    "score-drift-weekly": {"min_psi": 0.0, "min_predictions": 50},
}
REFERENCE_WEEKS = 8
YEAR = Timeline(REFERENCE_WEEKS, 52)
SMALL = Timeline(REFERENCE_WEEKS, 13)  # a quarter: a whole year through the service takes minutes
# Explicit outcomes inside the horizon: lognormal delay of median 2 days and σ 0.5, so
# P(delay > 10 d) = P(Z > ln 5 / 0.5 = 3.22) ≈ 0.06 % (standard normal tail, scipy.stats.norm.sf).
INSIDE = Outcomes(implicit=False, horizon_days=10.0, lag_days=1.0, median_days=2.0, sigma=0.5)
VOLUME_RANGE = (1000.0, 2000.0)
SMALL_VOLUME = 500.0
BATCH = 10_000  # the ingest API's largest batch
STATISTIC_RTOL = 1e-6  # hourly summaries merged vs. one Summary of the arrays: rounding only
_HOUR = 1.0 / 24.0

WindowKey = tuple[str, int, str, int]  # rule, version, segment, week
Verdict = tuple[Decision, float]  # a window decision and the level it was made at


# ----------------------------------------------------------------------------- years
@dataclass(frozen=True)
class Year:
    index: int
    spec: YearSpec
    seed: np.random.SeedSequence
    timeline: Timeline

    @property
    def label(self) -> str:
        kind = "implicit negatives" if self.spec.outcomes.implicit else "explicit outcomes"
        shadow = ", a 2nd version from mid-year" if self.spec.second_version_week is not None else ""
        return (f"{kind}, {self.spec.weekly_volume:,.0f} cases/wk{shadow}, "
                f"{self.timeline.judged_weeks} weeks judged")


def years_of(count: int, seed: int, *, small: bool = False) -> list[Year]:
    """Year i: implicit negatives when i mod 3 = 2; a second version shadow-scoring from mid-year
    when i mod 4 = 1; volume log-uniform in VOLUME_RANGE and the season's phase drawn from ``seed``.
    ``small``: one quarter (``SMALL``) of explicit outcomes at SMALL_VOLUME cases a week."""
    rng = np.random.default_rng([seed, 7])
    seeds = np.random.SeedSequence(seed).spawn(count)
    timeline = SMALL if small else YEAR
    out = []
    for i in range(count):
        outcomes = IMPLICIT if i % 3 == 2 and not small else INSIDE
        volume = float(np.exp(rng.uniform(*np.log(VOLUME_RANGE))))
        tail = math.ceil((outcomes.maturity_days + 3.0) / 7.0)  # the last judged cases mature
        weeks = timeline.reference_weeks + timeline.judged_weeks + tail
        shadow = timeline.reference_weeks + timeline.judged_weeks // 2 if i % 4 == 1 and not small else None
        spec = YearSpec(mix="beta(2,8)", outcomes=outcomes, weekly_volume=SMALL_VOLUME if small else volume,
                        weeks=weeks, seasonal_phase=float(rng.uniform(0.0, 2 * np.pi)),
                        second_version_week=shadow)
        out.append(Year(i, spec, seeds[i], timeline))
    return out


def rule_kinds(budget: float = BUDGET) -> list[tuple[Rule, str]]:
    """The default rules at ``budget`` with how each is evaluated."""
    def kind(rule: Rule) -> str:
        return ("chart" if isinstance(rule.spec, ChartKind) else "window" if isinstance(rule.spec, WindowKind)
                else "feed" if isinstance(rule.spec, FeedKind) else "other")

    return [(rule, kind(rule)) for rule in default_rules(budget)]


def replay_rules() -> list[Rule]:
    """The window rules as the replay runs them: REPLAY_BUDGET's shares, REPLAY_PARAMS merged in."""
    out = []
    for rule, kind in rule_kinds(REPLAY_BUDGET):
        if kind == "window":
            params = {**rule.params.model_dump(), **REPLAY_PARAMS.get(rule.name, {})}
            out.append(replace(rule, params=rule.spec.params.model_validate(params)))
    return out


# ----------------------------------------------------------------------------- openings
@dataclass(frozen=True, slots=True)
class Opened:
    """An alarm opening (or a backtest crossing) in the bench's terms: window rules by the week
    they judged (``about``: its first day), charts and the feed rule by the day they crossed."""

    rule: str
    version: int  # -1: the model-wide feed alarm
    segment: str
    day: float
    about: float
    level: float | None = None
    share: float | None = None
    statistic: float | None = None

    @property
    def week(self) -> int:
        return round(self.about / 7.0)

    def window_key(self) -> WindowKey:
        return (self.rule, self.version, self.segment, self.week)


def _day(text: str) -> float:
    return (datetime.fromisoformat(text.replace("Z", "+00:00")) - DAY_ZERO) / timedelta(days=1)


def from_service(alarm: dict[str, Any], rule: str, window: bool, maturity_days: float) -> Opened:
    """An alarm of GET …/alarms, or a crossing of a backtest, in the bench's terms."""
    evidence = alarm["evidence"]
    version = -1 if alarm["version"] is None else int(alarm["version"].removeprefix("v"))
    segment = ALL if alarm["segment"] is None else f"{alarm['segment']['key']}={alarm['segment']['value']}"
    crossed = _day(alarm["crossed_at"])
    about = _day(evidence["period_start"]) if window else crossed - maturity_days
    return Opened(rule, version, segment, crossed, about, evidence.get("level"),
                  evidence.get("budget_share_per_year"), evidence.get("statistic"))


def judged(opening: Opened, window: bool, timeline: Timeline, maturity_days: float) -> bool:
    """Whether the opening concerns the judged weeks, as null_year_run counts them."""
    if window:
        return timeline.start <= opening.about < timeline.end
    return timeline.start + maturity_days <= opening.day < timeline.end + maturity_days


# ----------------------------------------------------------------------------- the service
@dataclass
class ServiceRun:
    openings: list[Opened] = field(default_factory=list)
    replayed: list[Opened] = field(default_factory=list)  # window backtests at REPLAY_BUDGET
    replayed_at: float = 0.0  # the day (01:00) of the backtests
    resolved_by_person: int = 0
    refreshes: int = 0
    posted_predictions: int = 0
    posted_outcomes: int = 0
    jobs: Counter[str] = field(default_factory=Counter)  # the alarm job's figures, summed
    rules: list[dict[str, Any]] = field(default_factory=list)  # GET …/rules after the first evaluation
    budget: dict[str, Any] = field(default_factory=dict)
    seconds: float = 0.0


def _scratch() -> str | None:
    """A memory-backed directory when there is one: each year's database is thrown away."""
    shm = Path("/dev/shm")  # noqa: S108 — a private TemporaryDirectory is made inside it
    return str(shm) if shm.is_dir() else None


def _ok(response: Any) -> Any:
    assert response.status_code in (200, 201), response.text
    return response.json()


def _post(client: TestClient, path: str, key: str, items: list[dict[str, Any]]) -> None:
    for lo in range(0, len(items), BATCH):
        _ok(client.post(f"/v1/models/{MODEL}/{path}", json={key: items[lo:lo + BATCH]}))


def _predictions(cases: Cases, lo: int, hi: int) -> list[dict[str, Any]]:
    return [{"id": f"c{i}", "probability": float(cases.p[i]),
             "scored_at": rfc3339(instant(float(cases.scored[i]))), "version": f"v{int(cases.version[i])}",
             "tags": {SEGMENT_KEY: SEGMENT_VALUES[int(cases.segment[i])]}} for i in range(lo, hi)]


def _outcomes(cases: Cases, idx: np.ndarray) -> list[dict[str, Any]]:
    return [{"id": f"c{i}", "label": int(cases.y[i]),
             "observed_at": rfc3339(instant(float(cases.arrival[i])))} for i in idx]


def refresh_days(outcomes: Outcomes, cadence: str, last_day: int) -> set[int]:
    """Days whose 01:00 step refreshes: every day, or the weekday a week's windows fall due
    (a week ends on a Monday, day 7(w + 1); it is due H + L days later)."""
    if cadence == "daily":
        return set(range(last_day + 1))
    return {k for k in range(last_day + 1) if (k - round(outcomes.maturity_days)) % 7 == 0}


def run_service(cases: Cases, outcomes: Outcomes, timeline: Timeline, cadence: str) -> ServiceRun:
    """Post the year through the application day by day (module docstring); read back its alarms,
    then replay the window rules at REPLAY_BUDGET."""
    if outcomes.maturity_days != round(outcomes.maturity_days):
        raise ValueError("the service's horizon and lag are whole days")
    start = time.perf_counter()
    result = ServiceRun()
    last_day = math.ceil(timeline.end + outcomes.maturity_days)
    due = refresh_days(outcomes, cadence, last_day)
    kinds = {rule.name: kind for rule, kind in rule_kinds()}
    order = np.argsort(cases.arrival, kind="stable")
    arrivals = cases.arrival[order]
    with tempfile.TemporaryDirectory(dir=_scratch()) as tmp:
        # NORMAL: a throwaway file need not survive power loss (config.Settings.sqlite_synchronous).
        settings = Settings(database_url=f"sqlite:///{tmp}/calibrant.db", sqlite_synchronous="NORMAL")
        engine = make_engine(settings)
        migrate.upgrade(engine)
        clock = FixedClock(DAY_ZERO)
        try:
            with TestClient(create_app(settings, engine=engine, clock=clock)) as client:
                _ok(client.put(f"/v1/models/{MODEL}", json={
                    "outcome_horizon_days": int(outcomes.horizon_days),
                    "outcome_lag_days": int(outcomes.lag_days),
                    "implicit_negatives": outcomes.implicit, "segment_keys": [SEGMENT_KEY],
                    "reference": {"kind": "traffic", "start": rfc3339(instant(0.0)),
                                  "end": rfc3339(instant(timeline.start)), "version": "v0"}}))
                scored = arrived = 0
                to_resolve: list[int] = []
                seen: set[int] = set()
                for day in range(last_day + 1):
                    now = float(day) + _HOUR
                    clock.set(DAY_ZERO + timedelta(days=day, hours=1))
                    for alarm_id in to_resolve:  # a person, the day after the chart alarm opened
                        _ok(client.post(f"/v1/models/{MODEL}/alarms/{alarm_id}/resolve",
                                        json={"note": "looked into: nothing changed in the population"}))
                        result.resolved_by_person += 1
                    to_resolve = []
                    hi = int(np.searchsorted(cases.scored, now, side="left"))
                    _post(client, "predictions", "predictions", _predictions(cases, scored, hi))
                    result.posted_predictions += hi - scored
                    top = int(np.searchsorted(arrivals, now, side="right"))  # arrival ≤ now, as label_state
                    _post(client, "outcomes", "outcomes", _outcomes(cases, order[arrived:top]))
                    result.posted_outcomes += top - arrived
                    scored, arrived = hi, top
                    if day not in due:
                        continue
                    result.jobs.update(_ok(client.post("/v1/refresh?wait=true"))["result"]["jobs"]["alarms"])
                    result.refreshes += 1
                    if not result.rules:
                        listed = _ok(client.get(f"/v1/models/{MODEL}/rules"))
                        result.rules, result.budget = listed["rules"], listed["budget"]
                    listed = _ok(client.get(f"/v1/models/{MODEL}/alarms",
                                            params={"state": "open", "limit": 1000}))
                    for alarm in listed["alarms"]:
                        if kinds[alarm["rule"]] == "chart" and alarm["id"] not in seen:
                            seen.add(alarm["id"])
                            to_resolve.append(alarm["id"])
                everything = _ok(client.get(f"/v1/models/{MODEL}/alarms", params={"limit": 1000}))
                assert everything["count"] < 1000, "more alarms than one page: read them rule by rule"
                result.openings = [from_service(a, a["rule"], kinds[a["rule"]] == "window",
                                                outcomes.maturity_days) for a in everything["alarms"]]
                result.replayed = _replay(client, kinds, timeline)
                result.replayed_at = float(last_day) + _HOUR
        finally:
            engine.dispose()
    result.seconds = time.perf_counter() - start
    return result


def _replay(client: TestClient, kinds: dict[str, str], timeline: Timeline) -> list[Opened]:
    """Every window rule's crossings over the judged weeks at REPLAY_BUDGET and REPLAY_PARAMS
    (backtests: dry runs of the live evaluation)."""
    _ok(client.put(f"/v1/models/{MODEL}", json={"false_alarms_per_year": REPLAY_BUDGET}))
    for name, params in REPLAY_PARAMS.items():
        _ok(client.put(f"/v1/models/{MODEL}/rules/{name}", json={"params": params}))
    span = {"start": rfc3339(instant(timeline.start)), "end": rfc3339(instant(timeline.end))}
    out = []
    for name, kind in kinds.items():
        if kind != "window":
            continue
        replay = _ok(client.post(f"/v1/models/{MODEL}/rules/{name}/backtest", params=span))
        assert replay["crossing_count"] == len(replay["crossings"]), "more crossings than one page"
        out += [from_service(c, name, True, 0.0) for c in replay["crossings"]]
    return out


# ----------------------------------------------------------------------------- the bench's side
class WeekJudge:
    """The window kinds' inputs for each stream-week, from the arrays, as null_year_run builds them:
    a stream-week is ``SimPeriod(Summary.from_arrays(p, outcomes as of now))`` for every
    (version, segment) stream with a case in the week, "all" and each segment value; the
    reference is version 0's cases of the reference weeks, outcomes as of ``reference_now``."""

    def __init__(self, cases: Cases, outcomes: Outcomes, timeline: Timeline) -> None:
        self.cases = cases
        self.model = SimModel(outcomes.implicit, outcomes.horizon_days, outcomes.lag_days)
        self.delay = outcomes.maturity_days
        self.timeline = timeline
        self._reference = cases.take(np.flatnonzero((cases.scored < timeline.start) & (cases.version == 0)))

    def due(self, week: int) -> float:
        """When the service judges the week: the 01:00 after its end + H + L."""
        return 7.0 * (week + 1) + self.delay + _HOUR

    def references(self, now: float) -> dict[str, SimReferences]:
        """The traffic reference of each segment stream, as ``alarms.windows.references_of`` reads it."""
        ref = self._reference
        state = label_state(ref, now)
        names = stream_names()
        out = {ALL: references(*[Summary.from_arrays(ref.p, state)] * 2, self.model)}
        for s in range(len(names) - 1):
            idx = np.flatnonzero(ref.segment == s)
            summary = Summary.from_arrays(ref.p[idx], state[idx])
            out[names[s + 1]] = references(summary, summary, self.model)
        return out

    def periods(self, week: int, now: float,
                refs: dict[str, SimReferences]) -> dict[tuple[int, str], SimPeriod]:
        in_week = np.flatnonzero((self.cases.scored >= 7.0 * week) & (self.cases.scored < 7.0 * (week + 1)))
        cases = self.cases.take(in_week)
        state = label_state(cases, now)
        names = stream_names()
        out = {}
        for version in np.unique(cases.version):
            mine = cases.version == version
            out[(int(version), ALL)] = np.flatnonzero(mine)
            for s in np.unique(cases.segment[mine]):
                out[(int(version), names[int(s) + 1])] = np.flatnonzero(mine & (cases.segment == s))
        return {k: SimPeriod(Summary.from_arrays(cases.p[idx], state[idx]), 7.0 * week, 7.0 * (week + 1),
                             self.model, refs[k[1]]) for k, idx in out.items()}

    @staticmethod
    def verdicts(rule: Rule, periods: dict[tuple[int, str], SimPeriod]) -> dict[tuple[int, str], Verdict]:
        """The rule's decision on each live stream at the level its share gives (``per_test_level``)."""
        level = per_test_level(float(rule.share or 0.0), EVALUATIONS_PER_YEAR["week"], len(periods))
        decide = rule.spec.decide  # type: ignore[attr-defined]
        return {k: (decide(rule.params, p, level), level) for k, p in periods.items()}


def _compare(key: WindowKey, service: Opened, verdict: Verdict | None, share: float | None,
             notes: list[str]) -> None:
    """Notes where a service window crossing and the bench's decision on that stream-week differ."""
    if verdict is None or not verdict[0].crossed:
        said = "no such stream" if verdict is None else f"crossed = {verdict[0].crossed}"
        notes.append(f"{key}: the service crossed, the bench says {said}")
        return
    decision, level = verdict
    if service.share is None or share is None or not math.isclose(service.share, share, rel_tol=1e-12):
        notes.append(f"{key}: share {service.share} in the service, {share} in the bench")
    if service.level is None or not math.isclose(service.level, level, rel_tol=1e-12):
        notes.append(f"{key}: level {service.level} in the service, {level} in the bench")
    if service.statistic is None or decision.statistic is None or not math.isclose(
            service.statistic, decision.statistic, rel_tol=STATISTIC_RTOL, abs_tol=1e-12):
        notes.append(f"{key}: statistic {service.statistic} in the service, {decision.statistic} "
                     "in the bench")


# ----------------------------------------------------------------------------- one year, compared
@dataclass
class YearResult:
    year: Year
    cases: int
    service: ServiceRun
    simulated: list[Opened]
    replay_bench: set[WindowKey] = field(default_factory=set)
    notes: list[str] = field(default_factory=list)  # evidence mismatches of window crossings
    sim_seconds: float = 0.0
    cpu_seconds: float = 0.0  # the worker's CPU for the whole year, service and bench

    @property
    def maturity(self) -> float:
        return self.year.spec.outcomes.maturity_days

    def service_openings(self, *, in_judged: bool = True) -> list[Opened]:
        kinds = {rule.name: kind for rule, kind in rule_kinds()}
        return [o for o in self.service.openings
                if judged(o, kinds[o.rule] == "window", self.year.timeline, self.maturity) == in_judged]

    def window_disagreements(self) -> tuple[set[WindowKey], set[WindowKey]]:
        """Window openings only the service made, and only the bench made."""
        windows = {rule.name for rule, kind in rule_kinds() if kind == "window"}
        service = {o.window_key() for o in self.service_openings() if o.rule in windows}
        simulated = {o.window_key() for o in self.simulated if o.rule in windows}
        return service - simulated, simulated - service

    def replay_disagreements(self) -> tuple[set[WindowKey], set[WindowKey]]:
        service = {o.window_key() for o in self.service.replayed}
        return service - self.replay_bench, self.replay_bench - service

    @property
    def windows_agree(self) -> bool:
        none: tuple[set[WindowKey], set[WindowKey]] = (set(), set())
        return self.window_disagreements() == none and self.replay_disagreements() == none and not self.notes


def check_windows(result: YearResult, cases: Cases) -> None:
    """Each live window opening against ``WeekJudge`` at its due time; the replay against it at the end."""
    judge = WeekJudge(cases, result.year.spec.outcomes, result.year.timeline)
    rules = {rule.name: rule for rule, kind in rule_kinds() if kind == "window"}
    live_refs = judge.references(judge.due(result.year.timeline.reference_weeks))
    for o in result.service_openings():
        if o.rule in rules:
            periods = judge.periods(o.week, judge.due(o.week), live_refs)
            verdict = judge.verdicts(rules[o.rule], periods).get((o.version, o.segment))
            _compare(o.window_key(), o, verdict, rules[o.rule].share, result.notes)
    replaying = replay_rules()
    now = result.service.replayed_at
    refs = judge.references(now)
    decisions: dict[WindowKey, Verdict] = {}
    timeline = result.year.timeline
    for week in range(timeline.reference_weeks, timeline.reference_weeks + timeline.judged_weeks):
        periods = judge.periods(week, now, refs)
        for rule in replaying:
            for (version, segment), verdict in judge.verdicts(rule, periods).items():
                decisions[(rule.name, version, segment, week)] = verdict
    result.replay_bench = {k for k, (d, _) in decisions.items() if d.crossed}
    shares = {rule.name: rule.share for rule in replaying}
    for o in result.service.replayed:
        _compare(o.window_key(), o, decisions.get(o.window_key()), shares[o.rule], result.notes)


_WORKER: list[DesignTable] = []


def _init_worker() -> None:
    """One BLAS thread per process: chart designs oversubscribe two cores otherwise."""
    threadpool_limits(1)
    _WORKER[:] = [DesignTable()]


def run_year(year: Year, cadence: str) -> YearResult:
    if not _WORKER:
        _init_worker()
    cpu = time.process_time()  # the process's CPU, the service's request threads included
    cases = simulate(year.spec, np.random.default_rng(year.seed))
    service = run_service(cases, year.spec.outcomes, year.timeline, cadence)
    start = time.perf_counter()
    bench = run(year.spec, year.seed, default_rules(BUDGET), _WORKER[0], year.timeline)
    if bench.cases != len(cases):
        raise RuntimeError("the bench simulated other traffic than the service was given")
    simulated = [Opened(o.rule, o.version, o.segment, o.day, o.about) for o in bench.openings]
    result = YearResult(year, len(cases), service, simulated)
    check_windows(result, cases)
    result.sim_seconds = time.perf_counter() - start
    result.cpu_seconds = time.process_time() - cpu
    return result


def execute(years: list[Year], cadence: str, workers: int) -> Iterator[YearResult]:
    """The years over ``workers`` processes (in this one when 1), those with a second version first."""
    ordered = sorted(years, key=lambda y: y.spec.second_version_week is None)
    if workers <= 1:
        for year in ordered:
            yield run_year(year, cadence)
        return
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(workers, initializer=_init_worker) as pool:
        yield from pool.starmap(run_year, [(y, cadence) for y in ordered], chunksize=1)


# ----------------------------------------------------------------------------- report
def _fmt(key: WindowKey) -> str:
    rule, version, segment, week = key
    return f"{rule} v{version} {segment} week {week} (days {7 * week}-{7 * week + 7})"


def print_year(result: YearResult) -> None:
    service = Counter(o.rule for o in result.service_openings())
    warmup = Counter(o.rule for o in result.service_openings(in_judged=False))
    simulated = Counter(o.rule for o in result.simulated)
    replay_service = Counter(o.rule for o in result.service.replayed)
    replay_bench = Counter(k[0] for k in result.replay_bench)
    y, s = result.year, result.service
    print(f"\nyear {y.index}: {y.label}; {result.cases:,} cases, {s.posted_outcomes:,} outcomes posted, "
          f"{s.refreshes} refreshes ({s.jobs['designs']} chart designs, {s.jobs['periods']} window periods "
          f"judged), {s.resolved_by_person} chart alarm(s) resolved by a person; wall: service "
          f"{s.seconds:.0f} s, bench {result.sim_seconds:.0f} s; CPU {result.cpu_seconds:.0f} s")
    print(f"| rule | kind | share / yr | service openings | bench openings | about the reference weeks "
          f"| replay at budget {REPLAY_BUDGET:g}: service / bench crossings |")
    print("|---|---|---|---|---|---|---|")
    for rule, kind in rule_kinds():
        share = "outside" if rule.share is None else f"{rule.share:.3f}"
        replay = f"{replay_service[rule.name]} / {replay_bench[rule.name]}" if kind == "window" else "-"
        print(f"| {rule.name} | {kind} | {share} | {service[rule.name]} | {simulated[rule.name]} "
              f"| {warmup[rule.name]} | {replay} |")
    for label, (only_service, only_bench) in (("opening", result.window_disagreements()),
                                              ("replay crossing", result.replay_disagreements())):
        for key in sorted(only_service):
            print(f"  window {label} in the service only: {_fmt(key)}")
        for key in sorted(only_bench):
            print(f"  window {label} in the bench only: {_fmt(key)}")
    for line in result.notes:
        print(f"  window evidence differs: {line}")
    charts = {rule.name for rule, kind in rule_kinds() if kind == "chart"}
    for side, items in (("service", result.service_openings()), ("bench", result.simulated)):
        for o in sorted((o for o in items if o.rule in charts), key=lambda o: o.day):
            print(f"  chart opening ({side}): {o.rule} v{o.version} {o.segment}, crossed on day {o.day:.2f}")


def print_summary(results: list[YearResult], wall: float, cadence: str, workers: int) -> None:
    per_year = [len(r.service_openings()) for r in results]
    bench = [len(r.simulated) for r in results]
    replayed = sum(len(r.service.replayed) for r in results)
    print(f"\n{len(results)} well-calibrated model-year(s) through the service (refresh {cadence}), "
          f"budget {BUDGET:g} false alarm a year")
    print(f"false alarms per model-year, service: {per_year} (mean {np.mean(per_year):.2f}); "
          f"bench on the same traffic: {bench} (mean {np.mean(bench):.2f})")
    agree = all(r.windows_agree for r in results)
    print(f"window rules: openings, levels and statistics, and {replayed} replayed crossings at budget "
          f"{REPLAY_BUDGET:g}: {'service and bench agree exactly' if agree else 'DISAGREE (listed above)'}")
    cpu = sum(r.cpu_seconds for r in results)
    print(f"wall time {wall:.0f} s on {workers} worker process(es); CPU {cpu:.0f} s in the years "
          f"({cpu / len(results):.0f} s a year; CPU / 2 is the wall time on two idle cores)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--small", action="store_true",
                        help=f"one quarter-year at {SMALL_VOLUME:g} cases a week (the CI size)")
    parser.add_argument("--years", type=int, default=5)
    parser.add_argument("--seed", type=int, default=20290314)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--refresh", choices=("weekly", "daily"), default="weekly")
    args = parser.parse_args()
    years = years_of(1 if args.small else args.years, args.seed, small=args.small)
    workers = max(1, min(args.workers, len(years)))
    start = time.perf_counter()
    results = sorted(execute(years, args.refresh, workers), key=lambda r: r.year.index)
    for result in results:
        print_year(result)
    print_summary(results, time.perf_counter() - start, args.refresh, workers)


if __name__ == "__main__":
    main()
