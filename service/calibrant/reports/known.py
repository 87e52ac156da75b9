"""Summaries of the rows known at ``as_of``, shaped as the metrics service reads them.

The metrics service merges stored hourly summaries, which hold every row received so far;
a report as of a past instant needs only the rows received by then, with the labels known
then, so it rebuilds the same summaries (``Summary.from_arrays``, as the refresh does) from
those raw rows, folds them into UTC days split at the maturity boundary in force at ``as_of``
(``rollup.query.maturity_boundary``), and hands them to ``rollup.query.period_metrics``.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np
import orjson

from calibrant.rollup.query import DaySlices
from calibrant.stats.summary import Summary
from calibrant.store.as_of_rows import KnownRows
from calibrant.store.rollup_tables import MAX_SEGMENT_VALUES, OTHER_VALUE

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_DAY_S = 86_400
_HOUR_S = 3_600


def epoch_seconds(at: datetime) -> int:
    return int((at.astimezone(UTC) - _EPOCH).total_seconds())


def day_slices(rows: KnownRows, mask: np.ndarray | None, boundary: datetime | None) -> DaySlices:
    """Per UTC day of ``scored_at``, the summary of its mature and of its immature rows.

    A row is mature when the hour it was scored in starts at or before ``boundary`` (None: all
    are), the rule the stored hourly buckets follow. Rows keep their primary-key order within
    a day (stable sort), so a rebuild adds them in the same order.
    """
    p, y, t = rows.probability, rows.label, rows.scored_epoch
    if mask is not None:
        p, y, t = p[mask], y[mask], t[mask]
    if p.size == 0:
        return DaySlices({}, {})
    day = t // _DAY_S
    mature = np.ones(p.size, dtype=bool) if boundary is None else (t - t % _HOUR_S) <= epoch_seconds(boundary)
    order = np.argsort(day * 2 + (~mature), kind="stable")
    key = (day * 2 + (~mature))[order]
    cuts = np.flatnonzero(np.diff(key)) + 1
    out = DaySlices({}, {})
    for group in np.split(order, cuts):
        k = int(day[group[0]])
        target = out.mature if mature[group[0]] else out.immature
        target[_EPOCH + timedelta(days=k)] = Summary.from_arrays(p[group], y[group])
    return out


def whole(slices: DaySlices) -> tuple[Summary, Summary]:
    """The mature and the immature summary of every day together, merged in day order."""
    return (Summary.merge_many([slices.mature[d] for d in sorted(slices.mature)]),
            Summary.merge_many([slices.immature[d] for d in sorted(slices.immature)]))


@dataclass(frozen=True, slots=True)
class SegmentColumn:
    """One declared tag key: each row's value (``""`` when the row lacks the tag), values kept."""

    key: str
    values: np.ndarray  # object, per row, already pooled into OTHER_VALUE beyond the cap
    kept: list[str]


def segment_columns(rows: KnownRows, keys: list[str]) -> list[SegmentColumn]:
    """Each declared key's value per row; the MAX_SEGMENT_VALUES most frequent values are kept
    (ties by name) and the rest pooled under ``other``, as the stored segments pool them."""
    if not keys or rows.size == 0:
        return []
    parsed = [orjson.loads(text) if text else {} for text in rows.tags]
    out = []
    for key in keys:
        raw = [tags.get(key, "") for tags in parsed]
        counts = Counter(v for v in raw if v != "")
        ranked = sorted(counts, key=lambda v: (-counts[v], v))
        kept = set(ranked[:MAX_SEGMENT_VALUES])
        values = np.asarray([v if v in kept or v == "" else OTHER_VALUE for v in raw], dtype=object)
        names = sorted(kept) + ([OTHER_VALUE] if len(ranked) > MAX_SEGMENT_VALUES else [])
        out.append(SegmentColumn(key, values, names))
    return out
