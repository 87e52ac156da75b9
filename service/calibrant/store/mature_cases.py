"""The cases charts consume, in maturity order, read in bounded windows of maturity time.

Maturity time of a case (the charts' processing order is (matured_at, case_id)):
the end of its scored hour + D, where D is H + L with an outcome horizon H and lag L
(the moment its bucket becomes mature, docs/architecture.md, data semantics), and L
alone without a horizon. It depends only on when the case was scored, never on when
its label came, so a case never moves in the order: an outcome or a correction that
arrives after the watermark passed its case is late. Cohorts by scoring time, not by
report time: ordering by report would put quick outcomes first (docs/methods.md §23).

A new rule on a long history would otherwise read every case at once; the
windows keep memory to one window's cases, and every query is a range on the
index (model, version, scored_at) of predictions.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import orjson
from sqlalchemy import Connection, and_, func, select

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


def order_delay(model: Model) -> timedelta:
    """D: maturity is the end of the scored hour + D (H + L with a horizon, L without)."""
    return timedelta(days=(model.outcome_horizon_days or 0) + (model.outcome_lag_days or 0))


def maturity(model: Model, scored_at: datetime) -> datetime:
    return floor_hour(scored_at) + HOUR + order_delay(model)


def _columns(conn: Connection, model: Model) -> tuple[Any, ...]:
    return (Prediction.case_id, Prediction.probability, Prediction.scored_at, Prediction.tags,
            counted_label(conn, model.outcome_horizon_days))

_JOIN = and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id)


def mature_cases(conn: Connection, model: Model, version: str, *, after: datetime | None,
                 until: datetime) -> MatureCases:
    """Cases of ``version`` with after ≤ matured_at ≤ until, sorted by (matured_at, case_id).

    The caller drops the cases at or before its watermark.
    """
    delay = order_delay(model)
    # matured_at = floor_hour(scored_at) + 1h + delay ≤ until  ⇔  scored_at < floor_hour(until − delay)
    query = (select(*_columns(conn, model)).outerjoin(Outcome, _JOIN)
             .where(Prediction.model_id == model.id, Prediction.version == version,
                    Prediction.scored_at < floor_hour(until - delay)))
    if after is not None:
        query = query.where(Prediction.scored_at >= floor_hour(after - delay) - HOUR)
    rows = []
    for case_id, p, scored_at, tags, label in conn.execute(query):
        matured = maturity(model, scored_at)
        if after is not None and matured < after:
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

    Concatenated, the windows are exactly ``mature_cases(after, now − wait)``: each window
    (lo, lo + window] drops what the previous one already returned. ``wait`` holds cases
    back beyond their maturity until they are complete (rollup.outcome_delay.extra_wait);
    the order and the watermarks stay in maturity time, which does not depend on the wait,
    so a changed wait never re-reads or skips a case: a longer one pauses the reading, a
    shorter one resumes it from the watermark.
    """
    end = now - wait
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

    Maturity grows with scored_at.
    """
    scored = Prediction.scored_at
    since = () if t is None else (scored >= floor_hour(t - order_delay(model)),)
    s = conn.scalar(select(func.min(scored)).where(Prediction.model_id == model.id,
                                                    Prediction.version == version, *since))
    if s is None:
        return None
    return maturity(model, s.replace(tzinfo=UTC) if s.tzinfo is None else s)  # SQLite's MIN(): naive


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
        select(Prediction.case_id, Prediction.scored_at, Prediction.tags, Outcome.received_at)
        .join(Outcome, _JOIN)
        .where(Prediction.model_id == model.id, Prediction.version == version,
               Outcome.received_at > since)
    )
    out = []
    for case_id, scored_at, tags, received_at in conn.execute(query):
        out.append(LateOutcome(maturity(model, scored_at), case_id, orjson.loads(tags) if tags else {},
                               received_at))
    return out
