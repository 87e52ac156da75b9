"""Summaries of the rows known at ``as_of``, shaped as the metrics service reads them.

The metrics service merges stored hourly summaries, which hold every row received so far;
a report as of a past instant needs only the rows received by then, with the labels known
then, so it rebuilds the summaries (``Summary.from_arrays``, as the refresh does) from those
raw rows, one per report week (or one for the whole span) split at the maturity boundary in
force at ``as_of`` (``rollup.query.maturity_boundary``), and hands them to
``rollup.query.period_metrics`` in the ``DaySlices`` shape it reads.
"""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np

from calibrant.rollup.query import DaySlices
from calibrant.stats.summary import Summary
from calibrant.store.as_of_rows import KnownRows

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_HOUR_S = 3_600


def epoch_seconds(at: datetime) -> int:
    return int((at.astimezone(UTC) - _EPOCH).total_seconds())


def slices(rows: KnownRows, mask: np.ndarray | None, boundary: datetime | None,
           starts: list[datetime]) -> DaySlices:
    """The summary of the mature and of the immature rows of each span beginning at ``starts``.

    ``starts`` are ascending span starts (a report's weeks, or just its start); each row goes to
    the last start at or before its ``scored_at``, keyed by that start, which is how
    ``rollup.query.period_metrics`` finds it (it merges the keys in [period start, end)). A
    row is mature when the hour it was scored in starts at or before ``boundary`` (None: all
    are), the rule the stored hourly buckets follow. Rows keep their primary-key order within
    a group (stable sort), so a rebuild adds them in the same order.
    """
    p, y, t = rows.probability, rows.label, rows.scored_epoch
    if mask is not None:
        p, y, t = p[mask], y[mask], t[mask]
    if p.size == 0:
        return DaySlices({}, {})
    edges = np.asarray([epoch_seconds(s) for s in starts], dtype=np.int64)
    group = np.searchsorted(edges, t, side="right") - 1
    immature = (np.zeros(p.size, dtype=bool) if boundary is None
                else (t - t % _HOUR_S) > epoch_seconds(boundary))
    key = group * 2 + immature
    order = np.argsort(key, kind="stable")
    cuts = np.flatnonzero(np.diff(key[order])) + 1
    out = DaySlices({}, {})
    for members in np.split(order, cuts):
        first = members[0]
        target = out.immature if immature[first] else out.mature
        target[starts[int(group[first])]] = Summary.from_arrays(p[members], y[members])
    return out


def whole(parts: DaySlices) -> tuple[Summary, Summary]:
    """The mature and the immature summary of every span together, merged in time order."""
    return (Summary.merge_many([parts.mature[d] for d in sorted(parts.mature)]),
            Summary.merge_many([parts.immature[d] for d in sorted(parts.immature)]))
