"""``GET …/metrics`` and ``GET …/reliability``: validate the query, merge summaries, shape the answer."""

from __future__ import annotations

import re
from collections.abc import Collection
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from calibrant.errors import FieldError, InvalidInput, invalid
from calibrant.models.service import require
from calibrant.rollup import outcome_delay, query
from calibrant.rollup.periods import Granularity, period_count, periods
from calibrant.rollup.references import reference_summary
from calibrant.stats.reliability import ReliabilityDiagram
from calibrant.stats.result import Estimate
from calibrant.stats.summary import Summary
from calibrant.stats.summary_binned import ece, reliability_diagram
from calibrant.stats.summary_metrics import spiegelhalter_z
from calibrant.store import retention_repo, rollup_repo
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import required_instant
from calibrant.vocabulary.metrics import (
    COUNT_KEYS,
    INTERVAL_KEYS,
    METRIC_KEYS,
    NULL_LEVEL_KEYS,
    P_VALUE_KEYS,
)
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
    ``k_ci`` for interval keys, a status per key not measured. A key left out of ``metrics``
    (not asked for) is left out here too."""
    out: dict[str, Any] = {}
    status: dict[str, dict[str, str]] = {}
    for key in (*COUNT_KEYS, *METRIC_KEYS):
        est = metrics.get(key)
        if est is None:
            continue
        value = est.value
        out[key] = count(value) if key in COUNT_KEYS else value
        if key in INTERVAL_KEYS:
            out[f"{key}_ci"] = list(est.ci) if est.ci is not None and value is not None else None
        if key in P_VALUE_KEYS:
            out[f"{key}_p_value"] = p_value(est)
        if key in NULL_LEVEL_KEYS:
            out[f"{key}_null"] = null_level(est)
        if value is None or not est.measured:
            status[key] = {"state": est.status.value, "reason": est.reason}
    out["status"] = status
    return out


def p_value(est: Estimate) -> float | None:
    """The two-sided p-value a statistic carries, when it is measured (not below its floor)."""
    p = est.extra.get("p_value")
    return float(p) if est.measured and isinstance(p, float | int) else None


def null_level(est: Estimate) -> dict[str, float] | None:
    """{expected, upper_95} under the null, from ``extra['null_expected']`` and ``extra['null_95']``."""
    mean, upper = est.extra.get("null_expected"), est.extra.get("null_95")
    if not est.measured or not isinstance(mean, float | int) or not isinstance(upper, float | int):
        return None
    return {"expected": float(mean), "upper_95": float(upper)}


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
    keys: Collection[str] | None = None,
) -> dict[str, Any]:
    """The periods' metrics; with ``keys`` (the pages), the costlier metrics not named are skipped."""
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
    wanted = period_count(sel.start, sel.end, grain)
    if wanted > MAX_PERIODS:  # before building any: a century of days is 36,525 of them
        raise invalid("start", f"{wanted} periods; at most {MAX_PERIODS} per query")
    spans = periods(sel.start, sel.end, grain, window_days)
    conn = session.connection()
    boundary = query.maturity_boundary(model, now)
    first = min(p.data_start for p in spans)
    days = query.load_days(
        conn, model, first, spans[-1].end, segment=sel.segment, version=sel.version, boundary=boundary
    )
    reference = reference_summary(conn, model, sel.segment)
    delay = outcome_delay.stored(model)
    seals = ([] if model.pruned_before is None
             else retention_repo.seals_overlapping(conn, model.id, first, spans[-1].end))
    body = []
    for span in spans:
        entry: dict[str, Any] = {"start": span.start, "end": span.end}
        if span.window_start is not None:
            entry["window_start"] = span.window_start
        entry.update(serialise(query.period_metrics(span, days, model, reference, keys)))
        state = outcome_delay.period_state(model, delay, days, span.data_start, span.end, now)
        entry.update(label_completeness=state.label_completeness, provisional=state.provisional,
                     provisional_reason=state.provisional_reason)
        entry.update(sealed_state(model, seals, span.data_start, span.end))
        body.append(entry)
    return {
        "model": model.name,
        "granularity": grain.value,
        "version": sel.version,
        "tag": None if sel.segment[0] == ALL_SEGMENT else f"{sel.segment[0]}:{sel.segment[1]}",
        "refreshed_at": rollup_repo.last_job_run(conn, "refresh"),
        "periods": body,
    }


def sealed_state(model: Model, seals: list[retention_repo.Seal], start: datetime,
                 end: datetime) -> dict[str, Any]:
    """Whether retention removed raw rows of [start, end), and, when a seal in it was made under
    settings changed since (a lower settings generation), the earliest such seal's instant."""
    removed = model.pruned_before is not None and start < model.pruned_before
    stale = [s.sealed_at for s in seals
             if s.settings_generation < model.settings_generation and s.sealed_before > start
             and (s.sealed_from is None or s.sealed_from < end)]
    return {"raw_rows_removed": removed, "computed_under_settings_of": min(stale) if stale else None}


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
    labeled = mature.labeled(bool(model.implicit_negatives))
    diagram = reliability_diagram(labeled, n_bins=bins, strategy=strategy)
    tests = {"ece": ece(labeled, n_bins=bins, strategy=strategy), "spiegelhalter_z": spiegelhalter_z(labeled)}
    counts = mature.counts()
    non_events = counts["negative"] + (counts["unlabeled"] if model.implicit_negatives else 0.0)
    query.apply_floors(tests, counts["positive"], non_events)
    return {
        "ece": tests["ece"].value if tests["ece"].measured else None,
        "ece_null": null_level(tests["ece"]),
        "spiegelhalter_z": tests["spiegelhalter_z"].value if tests["spiegelhalter_z"].measured else None,
        "spiegelhalter_z_p_value": p_value(tests["spiegelhalter_z"]),
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
