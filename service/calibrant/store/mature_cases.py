"""The cases charts consume, in maturity order, read in bounded windows of maturity time.

Maturity time of a case (the charts' processing order is (matured_at, case_id)):

* with an outcome horizon H and lag L: the end of its scored hour + H + L, the
  moment its bucket becomes mature (docs/architecture.md, data semantics), whether or not a label came;
* without a horizon: the later of ``scored_at`` and the ``observed_at`` of the
  case's first label (it is mature once both are known), no earlier than L days
  before now. A correction keeps that time (``Outcome.first_observed_at``), so a
  case never moves in the order: a correction behind a watermark is late.

A new rule on a long history would otherwise read every case at once; the
windows keep memory to one window's cases, and every query is a range on an
index: (model, version, scored_at) of predictions, (model, first_observed_at)
of outcomes.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import orjson
from sqlalchemy import ColumnElement, Connection, and_, func, select
from sqlalchemy.orm import QueryableAttribute

from calibrant.store.event_label import counted_label
from calibrant.store.tables import Model, Outcome, Prediction

HOUR = timedelta(hours=1)
WINDOW = timedelta(days=1)


def floor_hour(t: datetime) -> datetime:
    return t.replace(minute=0, second=0, microsecond=0)


@dataclass(frozen=True, slots=True)
class MatureCases:
    """One version's cases in processing order; ``label`` −1 means mature but unlabeled."""

    matured_at: list[datetime]
    case_id: list[str]
    probability: np.ndarray
    label: np.ndarray
    tags: list[dict[str, str]]

    def __len__(self) -> int:
        return len(self.case_id)

    def after(self, t: datetime) -> MatureCases:
        """The cases that matured strictly after ``t`` (a suffix: the cases are in order)."""
        i = next((k for k, m in enumerate(self.matured_at) if m > t), len(self))
        if i == 0:
            return self
        return MatureCases(self.matured_at[i:], self.case_id[i:], self.probability[i:], self.label[i:],
                           self.tags[i:])


def _delay(model: Model) -> timedelta | None:
    if model.outcome_horizon_days is None:
        return None
    return timedelta(days=model.outcome_horizon_days + (model.outcome_lag_days or 0))


def maturity(model: Model, scored_at: datetime, first_observed: datetime | None) -> datetime | None:
    delay = _delay(model)
    if delay is not None:
        return floor_hour(scored_at) + HOUR + delay
    return None if first_observed is None else max(scored_at, first_observed)


def latest_maturity(model: Model, now: datetime) -> datetime:
    """No case matures after this at ``now``: now itself, or now − L without a horizon."""
    return now if _delay(model) is not None else now - timedelta(days=model.outcome_lag_days or 0)


def _columns(conn: Connection, model: Model) -> tuple[Any, ...]:
    return (Prediction.case_id, Prediction.probability, Prediction.scored_at, Prediction.tags,
            counted_label(conn, model.outcome_horizon_days), Outcome.first_observed_at)

_JOIN = and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id)


def mature_cases(conn: Connection, model: Model, version: str, *, after: datetime | None,
                 until: datetime) -> MatureCases:
    """Cases of ``version`` with after ≤ matured_at ≤ until, sorted by (matured_at, case_id).

    ``until`` is at most :func:`latest_maturity` of the caller's now. The caller drops
    the cases at or before its watermark.
    """
    base = select(*_columns(conn, model)).where(Prediction.model_id == model.id,
                                                Prediction.version == version)
    delay = _delay(model)
    if delay is not None:
        # matured_at = floor_hour(scored_at) + 1h + delay ≤ until  ⇔  scored_at < floor_hour(until − delay)
        query = base.outerjoin(Outcome, _JOIN).where(Prediction.scored_at < floor_hour(until - delay))
        if after is not None:
            query = query.where(Prediction.scored_at >= floor_hour(after - delay) - HOUR)
        queries = [query]
    else:
        s, f = Prediction.scored_at, Outcome.first_observed_at
        joined = base.join(Outcome, _JOIN).where(s <= until, f <= until)
        # max(s, f) ≥ after  ⇔  f ≥ after, or s ≥ after with f < after: two index ranges, disjoint.
        queries = [joined] if after is None else [joined.where(f >= after),
                                                   joined.where(s >= after, f < after)]
    rows = []
    for query in queries:
        for case_id, p, scored_at, tags, label, first_observed in conn.execute(query):
            matured = maturity(model, scored_at, first_observed)
            if matured is None or (after is not None and matured < after):
                continue
            state = (0 if model.implicit_negatives else -1) if label is None else label
            rows.append((matured, case_id, p, state, tags))
    rows.sort(key=lambda r: (r[0], r[1]))
    return MatureCases(
        [r[0] for r in rows], [r[1] for r in rows],
        np.array([r[2] for r in rows], dtype=np.float64),
        np.array([r[3] for r in rows], dtype=np.int8),
        [orjson.loads(r[4]) if r[4] else {} for r in rows],
    )


def mature_case_windows(conn: Connection, model: Model, version: str, *, after: datetime | None,
                        now: datetime, window: timedelta = WINDOW,
                        wait: timedelta = timedelta(0)) -> Iterator[MatureCases]:
    """:func:`mature_cases` from ``after`` (or the first case) to now − ``wait``, one window at a time.

    Concatenated, the windows are exactly ``mature_cases(after, latest_maturity(now) − wait)``:
    each window (lo, lo + window] drops what the previous one already returned. ``wait``
    holds cases back beyond their maturity (late outcomes, rollup.outcome_delay); the
    order and the watermarks stay in maturity time, so a changed wait never re-reads a case.
    """
    end = latest_maturity(model, now) - wait
    lo = after
    if lo is None:  # the whole history: from the version's first possible maturity
        lo = _next_maturity_bound(conn, model, version, None)
        if lo is None:
            return
    if lo > end:
        return
    previous: datetime | None = None
    while True:
        hi = min(lo + window, end)
        cases = mature_cases(conn, model, version, after=lo, until=hi)
        if previous is not None:
            cases = cases.after(previous)
        if len(cases):
            yield cases
        if hi >= end:
            return
        previous, lo = hi, hi
        if not len(cases):  # skip a quiet stretch (a retired version) in one probe, not a window a day
            nxt = _next_maturity_bound(conn, model, version, hi)
            if nxt is None or nxt > end:
                return
            lo = max(hi, nxt)


def _next_maturity_bound(conn: Connection, model: Model, version: str,
                         t: datetime | None) -> datetime | None:
    """A time no later than the first maturity after ``t`` (None: ever): nothing matures in (t, bound).

    With a horizon maturity grows with scored_at. Without one, a case maturing after t has
    scored_at > t or first_observed_at > t, and matures no earlier than that time.
    """
    def first(column: QueryableAttribute[datetime], *where: ColumnElement[bool]) -> datetime | None:
        v = conn.scalar(select(func.min(column)).where(*where))
        return v.replace(tzinfo=UTC) if v is not None and v.tzinfo is None else v  # SQLite's MIN()

    delay = _delay(model)
    in_version = (Prediction.model_id == model.id, Prediction.version == version)
    scored, observed = Prediction.scored_at, Outcome.first_observed_at
    if delay is not None:
        since = () if t is None else (scored >= floor_hour(t - delay),)
        s = first(scored, *in_version, *since)
        return None if s is None else maturity(model, s, None)
    s = first(scored, *in_version, *(() if t is None else (scored > t,)))
    f = first(observed, Outcome.model_id == model.id, *(() if t is None else (observed > t,)))
    bounds = [b for b in (s, f) if b is not None]
    return min(bounds) if bounds else None


@dataclass(frozen=True, slots=True)
class LateOutcome:
    matured_at: datetime
    case_id: str
    tags: dict[str, str]
    received_at: datetime


def outcomes_received_since(conn: Connection, model: Model, version: str,
                            since: datetime) -> list[LateOutcome]:
    """Outcomes (new or corrected) received after ``since``, with their case's maturity time."""
    query = (
        select(Prediction.case_id, Prediction.scored_at, Prediction.tags, Outcome.first_observed_at,
               Outcome.received_at)
        .join(Outcome, _JOIN)
        .where(Prediction.model_id == model.id, Prediction.version == version,
               Outcome.received_at > since)
    )
    out = []
    for case_id, scored_at, tags, first_observed, received_at in conn.execute(query):
        matured = maturity(model, scored_at, first_observed)
        if matured is not None:
            out.append(LateOutcome(matured, case_id, orjson.loads(tags) if tags else {}, received_at))
    return out
