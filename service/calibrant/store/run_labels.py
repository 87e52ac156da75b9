"""The labels of a chart run's cases: as they stand now, and as they stood at an instant.

A chart alarm rests on the cases its chart read between the run's start and the crossing
case (``alarms.chart_restatements``). These reads find the cases of that maturity span
whose outcome was received after an instant, and what each case's label was at another
instant (``outcome_revisions`` keeps every label a case has had). Both are small: a run
spans hours to weeks of one version, read through the (model, version, scored_at) index.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import UTC, datetime

import orjson
from sqlalchemy import Connection, and_, func, select

from calibrant.store.event_label import counted_label
from calibrant.store.mature_cases import HOUR, maturity, order_delay
from calibrant.store.tables import Model, Outcome, OutcomeRevision, Prediction

_CHUNK = 500  # case ids per IN list


@dataclass(frozen=True, slots=True)
class RunOutcome:
    """A case of the span whose outcome came after the instant asked about, with its label now."""

    case_id: str
    matured_at: datetime
    scored_at: datetime
    probability: float
    tags: dict[str, str]
    label_now: int  # the label the chart would count (store.event_label), never −1: it has one


def _utc(t: datetime) -> datetime:
    return t if t.tzinfo is not None else t.replace(tzinfo=UTC)


def received_in_span(conn: Connection, model: Model, version: str, *, matured_from: datetime,
                     matured_to: datetime, received_after: datetime) -> list[RunOutcome]:
    """Cases of ``version`` maturing in [matured_from, matured_to] whose outcome was received after
    ``received_after`` (a new label or a correction), sorted by (matured_at, case_id)."""
    delay = order_delay(model)
    join = and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id)
    # maturity = floor_hour(scored) + 1h + D: the span's scored times, with an hour's margin each side
    query = (select(Prediction.case_id, Prediction.scored_at, Prediction.probability, Prediction.tags,
                    counted_label(conn, model.outcome_horizon_days))
             .join(Outcome, join)
             .where(Prediction.model_id == model.id, Prediction.version == version,
                    Prediction.scored_at >= matured_from - delay - HOUR,
                    Prediction.scored_at < matured_to - delay + HOUR,
                    Outcome.received_at > received_after))
    out = []
    for case_id, scored_at, p, tags, label in conn.execute(query):
        matured = maturity(model, _utc(scored_at))
        if matured_from <= matured <= matured_to:
            out.append(RunOutcome(case_id, matured, _utc(scored_at), float(p),
                                  orjson.loads(tags) if tags else {}, int(label)))
    out.sort(key=lambda r: (r.matured_at, r.case_id))
    return out


def labels_at(conn: Connection, model: Model, cases: Iterable[RunOutcome], at: datetime) -> dict[str, int]:
    """Each case's label as known at ``at`` (its latest revision received by then), counted as the
    charts count it (with a horizon H, a 1 that occurred after scored + H is a 0); absent: none yet."""
    by_id = {c.case_id: c for c in cases}
    ids = list(by_id)
    out: dict[str, int] = {}
    horizon = model.outcome_horizon_days
    for k in range(0, len(ids), _CHUNK):
        chunk = ids[k:k + _CHUNK]
        latest = (select(OutcomeRevision.case_id, func.max(OutcomeRevision.revision).label("rev"))
                  .where(OutcomeRevision.model_id == model.id, OutcomeRevision.case_id.in_(chunk),
                         OutcomeRevision.received_at <= at)
                  .group_by(OutcomeRevision.case_id).subquery())
        query = (select(OutcomeRevision.case_id, OutcomeRevision.label, OutcomeRevision.occurred_at)
                 .join(latest, and_(OutcomeRevision.case_id == latest.c.case_id,
                                    OutcomeRevision.revision == latest.c.rev))
                 .where(OutcomeRevision.model_id == model.id))
        for case_id, label, occurred_at in conn.execute(query):
            counted = int(label)
            if (horizon is not None and counted == 1 and occurred_at is not None
                    and (_utc(occurred_at) - by_id[case_id].scored_at).total_seconds() > horizon * 86400):
                counted = 0
            out[case_id] = counted
    return out
