"""The report's figures: weekly periods, the whole span, versions, segments and tolerances.

Every figure is ``rollup.query.period_metrics`` of summaries built from the rows known at
``as_of`` (``reports.known``), serialised by ``rollup.metrics_service.serialise``: the same
functions, intervals and statuses as ``GET …/metrics``, over the data known then.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np

from calibrant.reports.known import slices, whole
from calibrant.rollup import query
from calibrant.rollup.metrics_service import diagram_dict, serialise
from calibrant.rollup.periods import Granularity, Period, periods
from calibrant.stats.summary import Summary
from calibrant.stats.summary_binned import reliability_diagram
from calibrant.store.as_of_rows import KnownRows
from calibrant.store.tables import Model

RELIABILITY_BINS = 10
# The figures a restatement compares and the charts draw.
HEADLINE = ("n_predictions", "n_labeled", "log_loss", "brier", "calibration_slope", "calibration_intercept",
            "oe_ratio", "ece", "auc", "psi")


@dataclass(frozen=True, slots=True)
class References:
    """The score-drift reference in force at ``as_of``: model-wide, and per segment (traffic only)."""

    model_wide: Summary | None
    by_segment: dict[tuple[str, str], Summary | None]
    note: str | None
    uploaded: bool = False

    def of(self, segment: tuple[str, str]) -> Summary | None:
        """An uploaded set serves every segment; a traffic segment is compared with its own past."""
        return self.model_wide if self.uploaded else self.by_segment.get(segment)


def report_periods(start: datetime, end: datetime) -> list[Period]:
    """ISO weeks (Monday 00:00 UTC) overlapping [start, end), clipped to it."""
    return [Period(max(p.start, start), min(p.end, end)) for p in periods(start, end, Granularity.WEEK)]


def figures(rows: KnownRows, model: Model, start: datetime, end: datetime, as_of: datetime,
            references: References) -> dict[str, Any]:
    """Weekly periods, the whole span, the reliability diagram, and the version and segment tables."""
    boundary = query.maturity_boundary(model, as_of)
    weeks = report_periods(start, end)
    by_week = slices(rows, None, boundary, [w.start for w in weeks])
    span = Period(start, end)
    weekly = []
    for period in weeks:
        weekly.append({"start": period.start, "end": period.end,
                       **serialise(query.period_metrics(period, by_week, model, references.model_wide))})
    overall = serialise(query.period_metrics(span, by_week, model, references.model_wide))
    mature, _ = whole(by_week)
    diagram = reliability_diagram(mature.labeled(bool(model.implicit_negatives)), n_bins=RELIABILITY_BINS,
                                  strategy="uniform")
    versions = []
    for code, version in enumerate(rows.versions):
        part = slices(rows, rows.version_code == code, boundary, [start])
        versions.append({"version": version,
                         **serialise(query.period_metrics(span, part, model, references.model_wide))})
    segments = []
    for column in rows.segments:
        for code, value in enumerate(column.values):
            part = slices(rows, column.codes == code, boundary, [start])
            reference = references.of((column.key, value))
            segments.append({"key": column.key, "value": value,
                             **serialise(query.period_metrics(span, part, model, reference))})
    return {"periods": weekly, "overall": overall, "reliability": diagram_dict(diagram),
            "versions": versions, "segments": segments}


def tolerance_checks(plan: dict[str, Any] | None, overall: dict[str, Any],
                     weekly: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Each tolerance of the plan against the span's value and interval, and the weeks outside it.

    ``within``: the value lies in [lower, upper]; ``interval_overlaps``: the 95 % interval
    meets the range (so the data cannot tell a breach apart from chance); None when the
    metric has no value.
    """
    out = []
    for tol in (plan or {}).get("tolerances", []):
        key, lower, upper = tol["metric"], tol.get("lower"), tol.get("upper")
        value = overall.get(key)
        ci = overall.get(f"{key}_ci")
        out.append({
            **tol,
            "value": value,
            "ci": ci,
            "within": None if value is None else _inside(value, lower, upper),
            "interval_overlaps": None if ci is None else _overlaps(ci, lower, upper),
            "weeks_outside": [
                {"start": w["start"], "end": w["end"], "value": w[key]}
                for w in weekly if w.get(key) is not None and not _inside(w[key], lower, upper)
            ],
        })
    return out


def _inside(value: float, lower: float | None, upper: float | None) -> bool:
    return (lower is None or value >= lower) and (upper is None or value <= upper)


def _overlaps(ci: list[float], lower: float | None, upper: float | None) -> bool:
    return (upper is None or ci[0] <= upper) and (lower is None or ci[1] >= lower)


def reference_summaries(reference_rows: KnownRows | None, uploaded: Summary | None,
                        note: str | None) -> References:
    """The reference of the settings in force: traffic rows known at ``as_of`` (every prediction
    of the window, as ``rollup.references.reference_summary`` takes it), or the uploaded set."""
    if uploaded is not None:
        return References(uploaded, {}, note, uploaded=True)
    if reference_rows is None or reference_rows.size == 0:
        return References(None, {}, note)
    rows = reference_rows
    model_wide = Summary.from_arrays(rows.probability, rows.label)
    by_segment: dict[tuple[str, str], Summary | None] = {}
    for column in rows.segments:
        for code, value in enumerate(column.values):
            mask = column.codes == code
            by_segment[(column.key, value)] = (
                Summary.from_arrays(rows.probability[mask], rows.label[mask]) if np.any(mask) else None)
    return References(model_wide, by_segment, note)
