"""Metrics of calendar periods, merged from hourly summaries (never from raw rows).

Maturity (DESIGN 3) is applied here, at query time: with a horizon H and lag L
an hourly bucket is mature when its end + H + L ≤ now. Label metrics use the
mature buckets only (unlabelled rows of mature buckets count as 0 when the
model has implicit negatives); counts, the mean probability and score drift
use every bucket. So the passing of time needs no recomputation.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import Connection

from calibrant.rollup.periods import Period
from calibrant.stats.result import Estimate, Status, missing
from calibrant.stats.summary import Summary
from calibrant.stats.summary_drift import psi
from calibrant.stats.summary_metrics import all_metrics, label_coverage, mean_probability, n_labelled
from calibrant.store import rollup_repo
from calibrant.store.rollup_repo import HOUR
from calibrant.store.tables import Model

COUNT_KEYS = ("n_predictions", "n_labeled", "n_immature")
METRIC_KEYS = (
    "label_coverage",
    "mean_probability",
    "observed_rate",
    "oe_ratio",
    "log_loss",
    "log_loss_expected",
    "brier",
    "brier_reliability",
    "brier_resolution",
    "brier_uncertainty",
    "calibration_intercept",
    "calibration_slope",
    "spiegelhalter_z",
    "ece",
    "auc",
    "psi",
)


NO_REFERENCE = (
    "the model has no reference: set `reference` with PUT /v1/models/{model}, "
    "or upload a validation set to POST /v1/models/{model}/reference"
)


def maturity_boundary(model: Model, now: datetime) -> datetime | None:
    """Buckets whose hour starts at or before the boundary are mature; None: all are.

    end + H + L ≤ now  ⇔  hour ≤ now − H − L − 1 h (the equality is mature, DESIGN 3).
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
    """Fetch the hourly summaries of [start, end) once and fold them into days.

    Periods and trailing windows are then unions of days, so a 52-week query with
    a 366-day window merges a few hundred day summaries per period, not ~9,000 hours.
    """
    mature: dict[datetime, list[Summary]] = defaultdict(list)
    immature: dict[datetime, list[Summary]] = defaultdict(list)
    for row in rollup_repo.summaries_between(
        conn, model.id, start, end, segment=segment, version=version
    ):
        day = row.hour.replace(hour=0)
        target = mature if boundary is None or row.hour <= boundary else immature
        target[day].append(Summary.from_bytes(row.payload))
    return DaySlices(
        {d: Summary.merge_many(s) for d, s in mature.items()},
        {d: Summary.merge_many(s) for d, s in immature.items()},
    )


def _days_in(days: dict[datetime, Summary], start: datetime, end: datetime) -> list[Summary]:
    return [s for d, s in days.items() if start <= d < end]


def period_metrics(
    period: Period, days: DaySlices, model: Model, reference: Summary | None
) -> dict[str, Estimate]:
    """Every API metric of one period (or of its trailing window)."""
    lo, hi = period.data_start, period.end
    mature = Summary.merge_many(_days_in(days.mature, lo, hi))
    immature = Summary.merge_many(_days_in(days.immature, lo, hi))
    everything = mature + immature
    out = all_metrics(mature, None, implicit_negatives=bool(model.implicit_negatives))
    n_all = sum(everything.counts().values())
    n_young = sum(immature.counts().values())
    out["n_predictions"] = Estimate(value=float(n_all), n=n_all)
    out["n_labeled"] = n_labelled(everything)
    out["n_immature"] = Estimate(value=float(n_young), n=n_young)
    out["label_coverage"] = label_coverage(everything)
    out["mean_probability"] = mean_probability(everything)
    if reference is None:
        out["psi"] = missing(Status.UNDEFINED, NO_REFERENCE)
    elif everything.is_empty():
        out["psi"] = missing(Status.INSUFFICIENT_DATA, "no predictions in this period")
    else:
        out["psi"] = psi(everything, reference)
    if model.outcome_horizon_days is not None and mature.is_empty() and not everything.is_empty():
        for key in METRIC_KEYS:
            if key not in {"label_coverage", "mean_probability", "psi"}:
                out[key] = missing(
                    Status.INSUFFICIENT_DATA,
                    "no mature predictions yet: outcomes are still inside horizon + lag",
                )
    return out
