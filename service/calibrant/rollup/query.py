"""Metrics of calendar periods, merged from hourly summaries (never from raw rows).

Maturity (docs/architecture.md, data semantics) is applied here, at query time: with a horizon H and lag L
an hourly bucket is mature when its end + H + L ≤ now. Label metrics use the
mature buckets only (unlabeled rows of mature buckets count as 0 when the
model has implicit negatives); counts, the mean probability and score drift
use every bucket. So the passing of time needs no recomputation.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Collection
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from calibrant.rollup.periods import Period
from calibrant.stats.result import Estimate, Status, missing
from calibrant.stats.summary import Summary
from calibrant.stats.summary_drift import psi
from calibrant.stats.summary_metrics import all_metrics, label_coverage, mean_probability, n_labeled
from calibrant.store import dirty, rollup_repo
from calibrant.store.dirty import day_of
from calibrant.store.rollup_repo import DAY, HOUR
from calibrant.store.tables import Model
from calibrant.store.unit import Connection
from calibrant.vocabulary import metrics

NO_REFERENCE = (
    "the model has no reference: set `reference` with PUT /v1/models/{model}, "
    "or upload a validation set to POST /v1/models/{model}/reference"
)


def maturity_boundary(model: Model, now: datetime) -> datetime | None:
    """Buckets whose hour starts at or before the boundary are mature; None: all are.

    end + H + L ≤ now  ⇔  hour ≤ now − H − L − 1 h (the equality is mature; docs/architecture.md).
    """
    if model.outcome_horizon_days is None:
        return None
    delay = timedelta(days=model.outcome_horizon_days + (model.outcome_lag_days or 0))
    return now - delay - HOUR


@dataclass
class DaySlices:
    """Per UTC day, the merged summaries of its mature and of its immature hours."""

    mature: dict[datetime, Summary]
    immature: dict[datetime, Summary]


def load_days(
    conn: Connection,
    model: Model,
    start: datetime,
    end: datetime,
    *,
    segment: tuple[str, str],
    version: str | None,
    boundary: datetime | None,
) -> DaySlices:
    """The summaries of [start, end), folded into UTC days.

    Whole days come from the daily tier when it is current (the day has no
    dirty mark) and the day lies wholly on one side of the maturity boundary;
    partial days at the edges, dirty days and the day the boundary cuts come
    from their hours. The answer is the same either way; a 52-week query reads
    ~364 day summaries instead of ~8,700 hours.
    """
    plan = _plan(conn, model.id, start.astimezone(UTC), end.astimezone(UTC), boundary)
    mature: dict[datetime, list[Summary]] = defaultdict(list)
    immature: dict[datetime, list[Summary]] = defaultdict(list)
    if plan.day_range is not None:
        for row in rollup_repo.summaries_between(
            conn, model.id, *plan.day_range, segment=segment, version=version, daily=True
        ):
            if row.start in plan.from_days:
                target = mature if boundary is None or row.start + DAY - HOUR <= boundary else immature
                target[row.start].append(Summary.from_bytes(row.payload))
    for lo, hi in plan.hour_ranges:
        for row in rollup_repo.summaries_between(conn, model.id, lo, hi, segment=segment, version=version):
            day = day_of(row.start)
            if day in plan.from_days:
                continue
            target = mature if boundary is None or row.start <= boundary else immature
            target[day].append(Summary.from_bytes(row.payload))
    return DaySlices(
        {d: Summary.merge_many(s) for d, s in mature.items()},
        {d: Summary.merge_many(s) for d, s in immature.items()},
    )


# Beyond this many separate hour ranges one scan of the whole span is cheaper than many queries.
_MAX_HOUR_RANGES = 8


@dataclass(frozen=True, slots=True)
class _Plan:
    from_days: frozenset[datetime]
    day_range: tuple[datetime, datetime] | None
    hour_ranges: list[tuple[datetime, datetime]]


def _plan(
    conn: Connection, model_id: int, start: datetime, end: datetime, boundary: datetime | None
) -> _Plan:
    """Which days to read from the daily tier and which hour ranges to read for the rest."""
    first = day_of(start) if start == day_of(start) else day_of(start) + DAY
    last = day_of(end)  # whole days are [first, last)
    if first >= last:
        return _Plan(frozenset(), None, [(start, end)])
    stale = dirty.dirty_days(conn, model_id, first, last)
    mixed: datetime | None = None
    if boundary is not None:
        cut = day_of(boundary)
        # The boundary's own day is mixed unless the boundary is its last hour (then it is all mature).
        mixed = cut if boundary < cut + DAY - HOUR else None
    whole = [first + i * DAY for i in range((last - first) // DAY)]
    from_days = frozenset(d for d in whole if d not in stale and d != mixed)
    gaps: list[tuple[datetime, datetime]] = []
    for lo, hi in [(start, first), *((d, d + DAY) for d in whole if d not in from_days), (last, end)]:
        if lo >= hi:
            continue
        if gaps and gaps[-1][1] == lo:
            gaps[-1] = (gaps[-1][0], hi)
        else:
            gaps.append((lo, hi))
    if len(gaps) > _MAX_HOUR_RANGES:
        gaps = [(start, end)]
    return _Plan(from_days, (first, last) if from_days else None, gaps)


def _days_in(days: dict[datetime, Summary], start: datetime, end: datetime) -> list[Summary]:
    return [s for d, s in days.items() if start <= d < end]


def period_metrics(
    period: Period, days: DaySlices, model: Model, reference: Summary | None,
    keys: Collection[str] | None = None,
) -> dict[str, Estimate]:
    """Every API metric of one period (or of its trailing window); the costlier ones only when in
    ``keys``, if given (``all_metrics``)."""
    lo, hi = period.data_start, period.end
    mature = Summary.merge_many(_days_in(days.mature, lo, hi))
    immature = Summary.merge_many(_days_in(days.immature, lo, hi))
    everything = mature + immature
    out = all_metrics(mature, None, implicit_negatives=bool(model.implicit_negatives), keys=keys)
    n_all = sum(everything.counts().values())
    n_young = sum(immature.counts().values())
    out["n_predictions"] = Estimate(value=float(n_all), n=n_all)
    out["n_labeled"] = n_labeled(everything)
    out["n_immature"] = Estimate(value=float(n_young), n=n_young)
    out["label_coverage"] = label_coverage(everything)
    out["mean_probability"] = mean_probability(everything)
    if reference is None:
        out["psi"] = missing(Status.NO_VALUE, NO_REFERENCE)
    elif everything.is_empty():
        out["psi"] = missing(Status.TOO_FEW_CASES, "no predictions in this period")
    else:
        out["psi"] = psi(everything, reference)
    counts = mature.counts()
    non_events = counts["negative"] + (counts["unlabeled"] if model.implicit_negatives else 0.0)
    apply_floors(out, counts["positive"], non_events)
    if model.outcome_horizon_days is not None and mature.is_empty() and not everything.is_empty():
        for key in metrics.METRIC_KEYS:
            if key not in metrics.LABEL_FREE_KEYS and key in out:
                out[key] = missing(
                    Status.TOO_FEW_CASES,
                    "no mature predictions yet: outcomes are still inside horizon + lag",
                )
    return out


def apply_floors(out: dict[str, Estimate], n_events: float, n_non_events: float) -> None:
    """Mark every metric below its registry floor ``too_few_cases`` (docs/methods.md §20.1).

    Below the floor the metric keeps no interval and no standard error; the
    slope and AUC (``withhold_value``) keep no value either. The reason names
    the floor and the period's counts, so a reader knows how much more data
    the metric needs.
    """
    for metric in metrics.METRICS:
        floor = metric.floor
        if floor is None or metric.key not in out or floor.met(n_events, n_non_events):
            continue
        est = out[metric.key]
        out[metric.key] = Estimate(
            value=None if floor.withhold_value else est.value,
            status=Status.TOO_FEW_CASES,
            reason=floor.reason(n_events, n_non_events),
            n=est.n,
            extra=est.extra,
        )
