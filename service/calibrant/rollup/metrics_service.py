"""``GET …/metrics`` and ``GET …/reliability``: validate the query, merge summaries, shape the answer."""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from calibrant.errors import FieldError, InvalidInput, invalid
from calibrant.models.service import require
from calibrant.rollup import outcome_delay, query
from calibrant.rollup.periods import Granularity, periods
from calibrant.rollup.references import reference_summary
from calibrant.stats.reliability import ReliabilityDiagram
from calibrant.stats.result import Estimate
from calibrant.stats.summary import Summary
from calibrant.stats.summary_binned import reliability_diagram
from calibrant.store import rollup_repo
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import required_instant
from calibrant.vocabulary.metrics import COUNT_KEYS, INTERVAL_KEYS, METRIC_KEYS
from calibrant.vocabulary.segments import ALL_SEGMENT, parse_tag

MAX_PERIODS = 1000
_WINDOW = re.compile(r"([1-9][0-9]{0,2})d")


@dataclass(frozen=True, slots=True)
class Selection:
    start: datetime
    end: datetime
    version: str | None
    segment: tuple[str, str]


def _segment(model: Model, tag: list[str]) -> tuple[str, str]:
    if not tag:
        return (ALL_SEGMENT, ALL_SEGMENT)
    if len(tag) > 1:
        raise invalid("tag", "at most one tag filter in v1")
    key, value = parse_tag("tag", tag[0])
    if key not in (model.segment_keys or []):
        raise invalid(
            "tag",
            f"{key!r} is not a declared segment key of {model.name!r}; declare it with "
            f'PUT /v1/models/{model.name} {{"segment_keys": [..., "{key}"]}} (up to 4 keys)',
        )
    return (key, value)


def _selection(model: Model, start: str | None, end: str | None, version: str | None,
               tag: list[str]) -> Selection:
    lo, hi = required_instant("start", start), required_instant("end", end)
    if hi <= lo:
        raise invalid("end", "must be after start")
    return Selection(lo, hi, version, _segment(model, tag))


def serialise(metrics: dict[str, Estimate]) -> dict[str, Any]:
    """API shape: every count an int (0 when there is none), every metric a number or null,
    ``k_ci`` for interval keys, a status per key not measured."""
    out: dict[str, Any] = {}
    status: dict[str, dict[str, str]] = {}
    for key in (*COUNT_KEYS, *METRIC_KEYS):
        est = metrics[key]
        value = est.value
        out[key] = count(value) if key in COUNT_KEYS else value
        if key in INTERVAL_KEYS:
            out[f"{key}_ci"] = list(est.ci) if est.ci is not None and value is not None else None
        if value is None or not est.measured:
            status[key] = {"state": est.status.value, "reason": est.reason}
    out["status"] = status
    return out


def metrics(
    session: Session,
    model_name: str,
    *,
    start: str | None,
    end: str | None,
    granularity: str,
    window: str | None,
    version: str | None,
    tag: list[str],
    now: datetime,
) -> dict[str, Any]:
    model = require(session, model_name)
    try:
        grain = Granularity(granularity)
    except ValueError:
        raise invalid("granularity", "must be day, week or month") from None
    window_days = None
    if window is not None:
        match = _WINDOW.fullmatch(window)
        if not match or not 1 <= int(match.group(1)) <= 366:
            raise invalid("window", "must be Nd with 1 <= N <= 366, e.g. window=28d")
        window_days = int(match.group(1))
    sel = _selection(model, start, end, version, tag)
    spans = periods(sel.start, sel.end, grain, window_days)
    if len(spans) > MAX_PERIODS:
        raise invalid("start", f"{len(spans)} periods; at most {MAX_PERIODS} per query")
    conn = session.connection()
    boundary = query.maturity_boundary(model, now)
    first = min(p.data_start for p in spans)
    days = query.load_days(
        conn, model, first, spans[-1].end, segment=sel.segment, version=sel.version, boundary=boundary
    )
    reference = reference_summary(conn, model, sel.segment)
    delay = outcome_delay.stored(model)
    body = []
    for span in spans:
        entry: dict[str, Any] = {"start": span.start, "end": span.end}
        if span.window_start is not None:
            entry["window_start"] = span.window_start
        entry.update(serialise(query.period_metrics(span, days, model, reference)))
        state = outcome_delay.period_state(model, delay, days, span.data_start, span.end, now)
        entry.update(label_completeness=state.label_completeness, provisional=state.provisional,
                     provisional_reason=state.provisional_reason)
        body.append(entry)
    return {
        "model": model.name,
        "granularity": grain.value,
        "version": sel.version,
        "tag": None if sel.segment[0] == ALL_SEGMENT else f"{sel.segment[0]}:{sel.segment[1]}",
        "refreshed_at": rollup_repo.last_job_run(conn, "refresh"),
        "periods": body,
    }


def reliability(
    session: Session,
    model_name: str,
    *,
    start: str | None,
    end: str | None,
    bins: int,
    strategy: str,
    version: str | None,
    tag: list[str],
    now: datetime,
) -> dict[str, Any]:
    model = require(session, model_name)
    if strategy not in {"uniform", "quantile"}:
        raise invalid("strategy", "must be uniform or quantile")
    if not 1 <= bins <= 50:  # before the divisibility test: bins=0 would divide by zero
        raise invalid("bins", "must be between 1 and 50")
    if strategy == "uniform" and 20 % bins:
        raise InvalidInput(
            "uniform bins must divide 20 so they are exact unions of the stored fine bins",
            [FieldError(None, "bins", "with strategy=uniform use 1, 2, 4, 5, 10 or 20")],
        )
    sel = _selection(model, start, end, version, tag)
    boundary = query.maturity_boundary(model, now)
    days = query.load_days(
        session.connection(), model, sel.start, sel.end, segment=sel.segment, version=sel.version,
        boundary=boundary,
    )
    mature = Summary.merge_many(list(days.mature.values()))
    diagram = reliability_diagram(
        mature.labeled(bool(model.implicit_negatives)), n_bins=bins, strategy=strategy
    )
    return {
        "model": model.name,
        "start": sel.start,
        "end": sel.end,
        "strategy": strategy,
        "refreshed_at": rollup_repo.last_job_run(session.connection(), "refresh"),
        **diagram_dict(diagram),
    }


def count(value: float | None) -> int:
    """A count summed from float summaries (whole numbers, held as floats) as an int; none is 0."""
    return 0 if value is None else round(value)


def diagram_dict(diagram: ReliabilityDiagram) -> dict[str, Any]:
    """The reliability diagram as plain data: per bin its edges, count, mean predicted,
    observed rate and the Wilson 95 % interval of the observed rate."""
    return {
        "n": count(diagram.n),
        "closed": diagram.closed,
        "interval": diagram.interval,
        "status": {"state": diagram.status.value, "reason": diagram.reason},
        "bins": [
            {
                "lower": b.lower,
                "upper": b.upper,
                "count": count(b.count),
                "mean_predicted": b.mean_predicted,
                "observed_rate": b.observed_rate,
                "observed_rate_ci": None if b.ci_low is None else [b.ci_low, b.ci_high],
            }
            for b in diagram.bins
        ],
    }
