"""What each page shows, gathered from the services in one read-only unit of work.

Every function reads; none writes (the default rules are not created here, unlike the
rules listing of the API). Figures come from ``pages.figures``; the templates only lay out.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from calibrant.alarms.service import alarm_out
from calibrant.errors import NotFound, invalid
from calibrant.models.service import case_record, require
from calibrant.pages import figures
from calibrant.rollup import metrics_service
from calibrant.store import alarm_repo, cases, models_repo, outbox_repo, rollup_repo
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import required_instant

SERIES = (  # (metric key, axis label, the value of a calibrated model or None)
    ("log_loss", "log-loss", None),
    ("brier", "Brier score", None),
    ("calibration_intercept", "calibration intercept", 0.0),
    ("calibration_slope", "calibration slope", 1.0),
    ("oe_ratio", "O/E (observed / expected)", 1.0),
)
HEADLINE = ("log_loss", "calibration_intercept", "calibration_slope", "oe_ratio")
# The metrics the pages show; the costlier fits they do not show are skipped (metrics_service.metrics).
SHOWN_KEYS = frozenset({key for key, _, _ in SERIES} | {"psi", "label_coverage"})
DEFAULT_SPAN = {"day": timedelta(days=56), "week": timedelta(weeks=52), "month": timedelta(days=365)}
TABLE_WINDOW_DAYS = 28
ALARMS_LISTED = 50
PATH_STEPS_LISTED = 12


def rfc3339(instant: datetime) -> str:
    return instant.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _week_start(now: datetime) -> datetime:
    day = now.astimezone(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
    return day - timedelta(days=day.weekday())


def _metrics(session: Session, name: str, now: datetime, *, start: datetime, end: datetime,
             granularity: str = "week", window: str | None = None, version: str | None = None,
             tag: str | None = None) -> list[dict[str, Any]]:
    answer = metrics_service.metrics(
        session, name, start=rfc3339(start), end=rfc3339(end), granularity=granularity, window=window,
        version=version, tag=[tag] if tag else [], now=now, keys=SHOWN_KEYS)
    periods: list[dict[str, Any]] = answer["periods"]
    return periods


def _headline(period: dict[str, Any] | None) -> dict[str, Any] | None:
    if period is None:
        return None
    status = period.get("status") or {}
    return {
        "start": period["start"], "end": period["end"],
        "n_labeled": period.get("n_labeled", 0),
        "labeled_share": period.get("label_coverage"),
        "completeness": period.get("label_completeness"),
        "provisional": figures.is_provisional(period),
        "values": {key: {"value": period.get(key), "state": (status.get(key) or {}).get("state", "measured"),
                         "reason": (status.get(key) or {}).get("reason", "")} for key in HEADLINE},
    }


def _first_reason(periods: list[dict[str, Any]], key: str) -> str | None:
    """Why no period has ``key``, when none has it; None when some period does."""
    if any(p.get(key) is not None for p in periods):
        return None
    reasons = [((p.get("status") or {}).get(key) or {}).get("reason") for p in periods]
    return next((r for r in reasons if r), "no period in the range")


def last_complete(periods: list[dict[str, Any]]) -> dict[str, Any] | None:
    """The newest period that has labels and can no longer change; else the newest with labels."""
    labeled = [p for p in periods if p.get("n_labeled", 0) > 0]
    settled = [p for p in labeled if not figures.is_provisional(p)]
    chosen = settled or labeled
    return chosen[-1] if chosen else None


@dataclass(frozen=True, slots=True)
class Freshness:
    last_scored_at: datetime | None
    refreshed_at: datetime | None


def _freshness(session: Session, model_id: int) -> Freshness:
    conn = session.connection()
    versions = alarm_repo.versions_of(conn, model_id)
    return Freshness(alarm_repo.last_scored_at(conn, model_id, versions),
                     rollup_repo.last_job_run(conn, "refresh"))


def overview(session: Session, now: datetime, only_model: str | None) -> list[dict[str, Any]]:
    """``/``: each model's last complete week, open alarms, labeled share and feed freshness."""
    this_week = _week_start(now)
    rows = []
    for model in models_repo.list_all(session):
        if only_model is not None and model.name != only_model:
            continue
        periods = _metrics(session, model.name, now, start=this_week - timedelta(weeks=8), end=this_week)
        open_alarms = alarm_repo.list_alarms(session, model.id, state="open", rule=None, version=None,
                                             segment=None, limit=1000)
        rows.append({
            "name": model.name, "description": model.description,
            "headline": _headline(last_complete(periods)),
            "open_alarms": len(open_alarms),
            "freshness": _freshness(session, model.id),
        })
    return rows


@dataclass(frozen=True, slots=True)
class Range:
    granularity: str
    start: datetime
    end: datetime
    defaulted: bool = False  # the start was not asked for


def page_range(granularity: str | None, start: str | None, end: str | None, now: datetime) -> Range:
    grain = granularity or "week"
    if grain not in DEFAULT_SPAN:
        raise invalid("granularity", "must be day, week or month")
    hi = required_instant("end", end) if end else (
        now.astimezone(UTC).replace(hour=0, minute=0, second=0, microsecond=0) + timedelta(days=1))
    lo = required_instant("start", start) if start else hi - DEFAULT_SPAN[grain]
    return Range(grain, lo, hi, defaulted=start is None)


def _clip_to_data(session: Session, model_id: int, span: Range) -> Range:
    """A default range starts no earlier than the model's first summary: no empty year of axis."""
    if not span.defaulted:
        return span
    first = alarm_repo.first_bucket_hour(session.connection(), model_id)
    if first is None or first <= span.start:
        return span
    return Range(span.granularity, max(span.start, first.replace(hour=0)), span.end)


def _segment_label(segment: dict[str, str] | None) -> str:
    return "all cases" if segment is None else f"{segment['key']}={segment['value']}"


def _table_row(label: str, tag: str | None, period: dict[str, Any]) -> dict[str, Any]:
    status = period.get("status") or {}
    small = any((status.get(k) or {}).get("state") == "too_few_cases"
                for k in ("log_loss", "calibration_slope"))
    return {
        "label": label, "tag": tag,
        "n_predictions": period.get("n_predictions", 0), "n_labeled": period.get("n_labeled", 0),
        "labeled_share": period.get("label_coverage"),
        "completeness": period.get("label_completeness"),
        "values": {k: period.get(k) for k in ("log_loss", "brier", "calibration_slope", "oe_ratio", "psi")},
        "small": small,
        "provisional": figures.is_provisional(period),
        "reasons": sorted({(s or {}).get("reason", "") for s in status.values()} - {""})[:2],
    }


def _window_period(session: Session, name: str, now: datetime, end: datetime, *, version: str | None = None,
                   tag: str | None = None) -> dict[str, Any]:
    """One trailing window of TABLE_WINDOW_DAYS days ending at the week start at or before ``end``."""
    week = _week_start(end)
    periods = _metrics(session, name, now, start=week - timedelta(weeks=1), end=week,
                       window=f"{TABLE_WINDOW_DAYS}d", version=version, tag=tag)
    return periods[-1]


def model_page(session: Session, name: str, now: datetime, span: Range, tag: str | None) -> dict[str, Any]:
    """The model page: series with bands, coverage, reliability, segments, versions, drift, alarms."""
    model = require(session, name)
    span = _clip_to_data(session, model.id, span)
    periods = _metrics(session, name, now, start=span.start, end=span.end, granularity=span.granularity,
                       tag=tag)
    alarms = [alarm_out(a) for a in alarm_repo.list_alarms(
        session, model.id, state=None, rule=None, version=None, segment=None, limit=ALARMS_LISTED)]
    open_alarms = [a for a in alarms if a["state"] == "open"]
    in_alarm: list[tuple[str, list[dict[str, Any]]]] = []
    for segment in {(a["segment"]["key"], a["segment"]["value"]) for a in open_alarms if a["segment"]}:
        seg_tag = f"{segment[0]}:{segment[1]}"
        if seg_tag != tag:
            in_alarm.append((f"{segment[0]}={segment[1]} (in alarm)", _metrics(
                session, name, now, start=span.start, end=span.end, granularity=span.granularity,
                tag=seg_tag)))
    in_alarm.sort()
    alarm_times = [figures.plot_time(a["crossed_at"]) for a in open_alarms]
    diagram = metrics_service.reliability(
        session, name, start=rfc3339(span.start), end=rfc3339(span.end), bins=10, strategy="uniform",
        version=None, tag=[tag] if tag else [], now=now)
    conn = session.connection()
    segments = [
        _table_row(f"{key}={value}", f"{key}:{value}", _window_period(session, name, now, span.end,
                                                                      tag=f"{key}:{value}"))
        for key, values in sorted(rollup_repo.segment_values(conn, model.id).items())
        for value in sorted(values)
    ]
    versions = [_table_row(version, None, _window_period(session, name, now, span.end, version=version))
                for version in alarm_repo.versions_of(conn, model.id)]
    return {
        "model": model, "span": span, "tag": tag, "periods": periods,
        "provisional_count": sum(figures.is_provisional(p) for p in periods),
        "figures": {
            **{f"series-{key}": figures.series(periods, key, label, in_alarm, alarm_times, ideal)
               for key, label, ideal in SERIES},
            "coverage": figures.coverage(periods),
            "reliability": figures.reliability(diagram),
            "drift": figures.drift(periods),
        },
        "series": SERIES,
        "segments_in_alarm": [label for label, _ in in_alarm],
        "diagram": diagram,
        "drift_reason": _first_reason(periods, "psi"),
        "segments": segments,
        "versions": versions,
        "table_window_days": TABLE_WINDOW_DAYS,
        "alarms": alarms,
        "freshness": _freshness(session, model.id),
    }


def alarm_page(session: Session, name: str, alarm_id: int) -> dict[str, Any]:
    """The alarm page: evidence, the chart's path to its limit, the crossing case, the deliveries."""
    model = require(session, name)
    alarm = alarm_repo.alarm(session, model.id, alarm_id)
    if alarm is None:
        raise NotFound(f"model {name!r} has no alarm {alarm_id}")
    out = alarm_out(alarm)
    evidence = out["evidence"] or {}
    is_chart = bool(evidence.get("chart_path")) and evidence.get("control_limit") is not None
    crossing_case = evidence.get("crossing_case")
    record = case_record(session, name, crossing_case) if crossing_case else None
    neighbours = _cases_around(session, model.id, alarm, record)
    path = evidence.get("chart_path") or []
    steps = [{"at": t, "s": s, "change": s - path[i - 1][1] if i else None}
             for i, (t, s) in enumerate(path)][-PATH_STEPS_LISTED:]
    scalar_evidence = {k: v for k, v in evidence.items()
                       if k not in {"chart_path", "design", "detail"} and not isinstance(v, dict | list)}
    return {
        "model": model, "alarm": out, "segment_label": _segment_label(out["segment"]),
        "evidence": scalar_evidence, "design": evidence.get("design"), "detail": evidence.get("detail"),
        "figure": figures.cusum(evidence) if is_chart else None,
        "crossing_case": crossing_case, "case": record, "steps": steps, "nearby": neighbours,
        "deliveries": outbox_repo.alarm_deliveries(session, model.id, alarm_id),
    }


def _cases_around(session: Session, model_id: int, alarm: Any,
                  record: cases.CaseRecord | None) -> list[cases.NearbyCase]:
    """The alarm's stream's cases scored just before and after the crossing case (its version's
    prediction, or its only one when the alarm spans every version)."""
    if record is None or not record.predictions:
        return []
    own = [p for p in record.predictions if alarm.version is None or p.version == alarm.version]
    if not own:
        return []
    segment = None if alarm.segment_key is None else (alarm.segment_key, alarm.segment_value)
    return cases.nearby(session, model_id, own[0].version, own[0].scored_at, segment)

