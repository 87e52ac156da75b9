"""Chart order of corrected cases when the model has no outcome horizon.

Without a horizon a case matures at max(scored_at, observed_at) (``alarm_repo``),
so a correction that carries a later ``observed_at`` would move an already
consumed case ahead of the stream's watermark and feed it a second time. The
charts need one, reproducible order per case (METHODS 7), so here a case's
chart maturity is fixed by the *earliest* observation any of its labels had:

    chart maturity = max(scored_at, min over label revisions of observed_at).

That only ever moves a case earlier than ``alarm_repo`` puts it, so every case a
stream still needs is among those ``mature_cases`` returns. A corrected case
whose chart maturity lies at or behind the watermark while its current
maturity lies ahead of it is a correction the chart has already passed: it is
counted once as skipped-late — in the first run that sees the case with its
current label — like any outcome that arrives behind the watermark. (With a
horizon, maturity never depends on the label and ``charts._count_late`` sees
corrections directly.)

The SQL would sit better in ``store/alarm_repo.py`` next to ``mature_cases``;
it lives here while that module is being changed for other work.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime, timedelta

import numpy as np
from sqlalchemy import Connection, and_, or_, select

from calibrant.store.alarm_repo import MatureCases
from calibrant.store.tables import Model, Outcome, OutcomeRevision, Prediction


@dataclass(frozen=True, slots=True)
class Correction:
    """A case whose label changed: when it first became mature, and when its current label arrived."""

    earliest: datetime
    received_at: datetime


def corrected_cases(conn: Connection, model: Model, version: str, *,
                    after: datetime | None) -> dict[str, Correction]:
    """Corrected cases of ``version`` (revision > 1) that ``mature_cases(after=...)`` can return."""
    if model.outcome_horizon_days is not None:
        return {}
    query = (
        select(Prediction.case_id, Prediction.scored_at, OutcomeRevision.observed_at, Outcome.received_at)
        .join(Outcome, and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id))
        .join(OutcomeRevision, and_(OutcomeRevision.model_id == Prediction.model_id,
                                    OutcomeRevision.case_id == Prediction.case_id))
        .where(Prediction.model_id == model.id, Prediction.version == version, Outcome.revision > 1)
    )
    if after is not None:
        query = query.where(or_(Prediction.scored_at >= after, Outcome.observed_at >= after))
    out: dict[str, Correction] = {}
    for case_id, scored_at, observed_at, received_at in conn.execute(query):
        earliest = max(scored_at, observed_at)
        known = out.get(case_id)
        if known is None or earliest < known.earliest:
            out[case_id] = Correction(earliest, received_at)
    return out


@dataclass(frozen=True, slots=True)
class Reordered:
    """``cases`` in chart order; ``current[i]`` is case i's maturity as ``alarm_repo`` gave it."""

    cases: MatureCases
    current: list[datetime]
    corrected: frozenset[int]


def reorder(cases: MatureCases, fixes: dict[str, Correction]) -> Reordered:
    """Give corrected cases their chart maturity and restore (maturity, case id) order."""
    hit = [i for i, c in enumerate(cases.case_id) if c in fixes]
    if not hit:
        return Reordered(cases, cases.matured_at, frozenset())
    matured = list(cases.matured_at)
    for i in hit:
        matured[i] = min(matured[i], fixes[cases.case_id[i]].earliest)
    order = sorted(range(len(cases)), key=lambda i: (matured[i], cases.case_id[i]))
    where = np.asarray(order, dtype=np.int64)
    moved = replace(cases, matured_at=[matured[i] for i in order], case_id=[cases.case_id[i] for i in order],
                    probability=cases.probability[where], label=cases.label[where],
                    tags=[cases.tags[i] for i in order])
    position = {old: new for new, old in enumerate(order)}
    return Reordered(moved, [cases.matured_at[i] for i in order], frozenset(position[i] for i in hit))


def passed_corrections(view: Reordered, fixes: dict[str, Correction], idx: list[int], *,
                       watermark: tuple[datetime, str], previous_run: datetime, lag: timedelta) -> int:
    """Corrections among ``idx`` the stream has already passed, not counted in an earlier run.

    Passed: chart maturity at or behind the watermark, current maturity ahead of it.
    Counted earlier exactly when the previous run already returned the case with
    this label: the label had arrived (received ≤ previous run) and was mature
    then (current maturity ≤ previous run − lag).
    """
    count = 0
    for i in idx:
        if i not in view.corrected:
            continue
        case = view.cases.case_id[i]
        if (view.cases.matured_at[i], case) > watermark or (view.current[i], case) <= watermark:
            continue
        seen_before = (fixes[case].received_at <= previous_run and view.current[i] <= previous_run - lag)
        count += not seen_before
    return count
