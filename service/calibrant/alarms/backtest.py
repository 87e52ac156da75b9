"""Replay history through one rule and say when it would have crossed its limit, writing and sending nothing.

Charts: the mature cases of [start, end) (by maturity time, as known now)
are fed through fresh in-memory streams exactly as the live job would — the
first ``min_design_cases`` labeled cases of each stream design its limit,
the chart starts after them — and after each crossing the chart restarts, as
if a person had resolved the alarm at once. Window rules: every ready period
in [start, end) is judged as the live job judges it. Nothing is stored; the
caller's transaction is rolled back, so no alarm, chart state or outbox event
results.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np

from calibrant.alarms import budget, charts, kinds, windows
from calibrant.alarms.kinds import Kind
from calibrant.alarms.kinds.calibration_chart import ChartParams
from calibrant.alarms.records import segment_out, version_scope
from calibrant.alarms.service import ensure_defaults
from calibrant.errors import NotFound, invalid
from calibrant.models.service import require
from calibrant.rollup.compute import SegmentBook
from calibrant.rollup.periods import Granularity, period_count
from calibrant.store import alarm_repo, rollup_repo
from calibrant.store.alarm_tables import AlarmRule, ChartStream
from calibrant.store.mature_cases import mature_case_windows
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import required_instant

MAX_CROSSINGS = 1000
MAX_PERIODS = 1000  # the same cap as a metrics query


def backtest(session: Session, model_name: str, rule_name: str, *, start: str | None, end: str | None,
             now: datetime) -> dict[str, Any]:
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    rule = alarm_repo.rule_named(session, model.id, rule_name)
    if rule is None:
        raise NotFound(f"model {model.name!r} has no rule {rule_name!r}")
    lo, hi = required_instant("start", start), required_instant("end", end)
    if hi <= lo:
        raise invalid("end", "must be after start")
    evaluation = kinds.spec(rule.kind).evaluation
    if evaluation == "chart":
        crossings = replay_chart(session, model, rule, lo, min(hi, now), now)
    elif evaluation == "window":
        _check_period_count(rule, lo, min(hi, now))
        share = budget.share_as_enabled(session, model, rule)
        report = windows.evaluate_rule(session, model, rule, now, share=share, start=lo, end=hi,
                                       dry_run=True)
        crossings = [{"crossed_at": d["period_end"], **version_scope(d["version"]),
                      "segment": segment_out(*d["segment"]), "summary": d["summary"],
                      "evidence": d["evidence"]}
                     for d in report.decisions]
    else:
        raise invalid("rule", "starvation depends on when data arrived, which a replay of stored "
                              "history cannot reproduce; backtests cover charts and window rules")
    return {"model": model.name, "rule": rule.name, "kind": Kind(rule.kind).value, "start": lo, "end": hi,
            "crossing_count": len(crossings), "crossings": crossings[:MAX_CROSSINGS], "sent": 0}


def _check_period_count(rule: AlarmRule, start: datetime, end: datetime) -> None:
    """A window replay judges one period at a time: refuse a range of more than MAX_PERIODS."""
    params: Any = kinds.spec(rule.kind).params.model_validate(rule.params)  # a window kind's params
    grain = Granularity(params.granularity)
    wanted = period_count(start, end, grain)
    if wanted > MAX_PERIODS:
        raise invalid("start", f"{wanted} {grain.value} periods; a backtest replays at most {MAX_PERIODS}")


def replay_chart(session: Session, model: Model, rule: AlarmRule, start: datetime, end: datetime,
                 now: datetime) -> list[dict[str, Any]]:
    params = ChartParams.model_validate(rule.params)
    conn = session.connection()
    book = SegmentBook(list(model.segment_keys or []), rollup_repo.segment_values(conn, model.id))
    # Per stream only what the chart needs (p, y, maturity, id), gathered window by window.
    per_stream: dict[tuple[str, str, str], tuple[list[float], list[float], list[float], list[str]]] = {}
    for version in alarm_repo.versions_of(conn, model.id):
        for cases in mature_case_windows(conn, model, version, after=start, now=end):
            for i, tags in enumerate(cases.tags):
                if cases.label[i] < 0 or not start <= cases.matured_at[i] < end:
                    continue
                for seg in charts.case_segments(tags, book):
                    ps, ys, ts, ids = per_stream.setdefault((version, *seg), ([], [], [], []))
                    ps.append(float(cases.probability[i]))
                    ys.append(float(cases.label[i]))
                    ts.append(cases.matured_at[i].timestamp())
                    ids.append(cases.case_id[i])
    n_charts = max(len(alarm_repo.streams_of(session, rule.id)), len(per_stream), 1)
    share = charts.rule_share(session, model, rule)
    crossings: list[dict[str, Any]] = []
    for (version, key, value), (ps, ys, ts, ids) in per_stream.items():
        stream = ChartStream(rule_id=rule.id, version=version, segment_key=key, segment_value=value,
                             consumed=0, skipped_late=0, unlabeled_at_maturity=0, recent=b"", path=[],
                             updated_at=now)
        p, y, t = np.array(ps), np.array(ys), np.array(ts)
        pos = 0
        while pos < p.size and len(crossings) < MAX_CROSSINGS:
            crossing, _ = charts.feed(stream, rule, params, p=p[pos:], y=y[pos:], times=t[pos:],
                                      case_ids=ids[pos:], n_charts=n_charts, share=share, now=now)
            if crossing is None:
                break
            crossings.append({"crossed_at": crossing.crossed_at, **version_scope(version),
                              "segment": segment_out(key, value),
                              "summary": f"chart crossed h = {crossing.evidence['control_limit']:.3f}",
                              "evidence": crossing.evidence})
            used = ids.index(crossing.case_id, pos) + 1
            pos = used
            charts.restart(stream, params, n_charts, now, share)
    crossings.sort(key=lambda f: f["crossed_at"])
    return crossings
