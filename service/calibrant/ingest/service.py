"""Ingest use cases: validate, write idempotently, report counts.

Services flush but never commit: the caller (a request or CLI command) owns
the unit of work, so a 2xx is sent only after the commit returned.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from calibrant.clock import Clock
from calibrant.errors import Conflict
from calibrant.ingest.batch import check_outcomes, check_predictions, parse_outcomes, parse_predictions
from calibrant.store import audit, models_repo
from calibrant.store.batches import OutcomeColumns, PredictionColumns
from calibrant.store.ingest_writes import OutcomeWrite, insert_predictions, upsert_outcomes
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import InstantWindow
from calibrant.vocabulary.names import check_name


@dataclass(frozen=True, slots=True)
class PredictionResult:
    accepted: int
    duplicates: int
    expired: int = 0  # scored before the model's retention boundary: not stored


def _model_for_ingest(session: Session, name: str, clock: Clock, actor: str) -> Model:
    model, created = models_repo.get_or_create(session, check_name(name), clock.now())
    if created:
        audit.record(
            session,
            at=clock.now(),
            actor=actor,
            action="model.created",
            target=name,
            detail={"how": "first ingest, default settings"},
            model_id=model.id,
        )
    return model


def ingest_predictions(
    session: Session, model_name: str, body: bytes, *, max_items: int, window: InstantWindow,
    clock: Clock, actor: str
) -> PredictionResult:
    """Store a batch of predictions, all or nothing.

    Raises ``InvalidInput`` (422) for any bad item (``scored_at`` outside
    ``window`` included) and ``Conflict`` (409) when a
    (version, id) already exists with different content. An empty batch writes
    nothing, not even the model it names.
    """
    check_name(model_name)
    return _store_predictions(session, model_name, parse_predictions(body, max_items, window), clock, actor)


def ingest_prediction_items(
    session: Session, model_name: str, items: list[Any], *, window: InstantWindow, clock: Clock,
    actor: str
) -> PredictionResult:
    """``ingest_predictions`` for items already read from elsewhere (a file): same checks, same
    writes, same errors (indexes are positions in ``items``)."""
    check_name(model_name)
    return _store_predictions(session, model_name, check_predictions(items, window), clock, actor)


def _store_predictions(
    session: Session, model_name: str, batch: PredictionColumns, clock: Clock, actor: str
) -> PredictionResult:
    if not len(batch):
        return PredictionResult(0, 0)
    model = _model_for_ingest(session, model_name, clock, actor)
    written = insert_predictions(session.connection(), model.id, batch, clock.now())
    if written.conflicts:
        raise Conflict(
            f"{len(written.conflicts)} prediction(s) already exist with different content; "
            "nothing was stored. Predictions are immutable: score a new version instead.",
            [{"index": c.index, "id": c.case_id, "version": c.version} for c in written.conflicts],
        )
    return PredictionResult(written.accepted, written.duplicates, written.expired)


def ingest_outcomes(
    session: Session, model_name: str, body: bytes, *, max_items: int, window: InstantWindow,
    clock: Clock, actor: str
) -> OutcomeWrite:
    """Store a batch of outcomes: new labels, duplicates and corrections (history kept).

    ``observed_at`` must lie in ``window``; an empty batch
    writes nothing, not even the model it names.
    """
    check_name(model_name)
    return _store_outcomes(session, model_name, parse_outcomes(body, max_items, window), clock, actor)


def ingest_outcome_items(
    session: Session, model_name: str, items: list[Any], *, window: InstantWindow, clock: Clock,
    actor: str
) -> OutcomeWrite:
    """``ingest_outcomes`` for items already read from elsewhere (a file)."""
    check_name(model_name)
    return _store_outcomes(session, model_name, check_outcomes(items, window), clock, actor)


def _store_outcomes(
    session: Session, model_name: str, batch: OutcomeColumns, clock: Clock, actor: str
) -> OutcomeWrite:
    if not len(batch):
        return OutcomeWrite(0, 0, 0, [])
    model = _model_for_ingest(session, model_name, clock, actor)
    return upsert_outcomes(session.connection(), model.id, batch, clock.now())


def record_import(
    session: Session, model_name: str, kind: str, detail: dict[str, Any], *, clock: Clock, actor: str
) -> None:
    """One audit line for a whole file import (its batches were stored by the functions above).

    Nothing is recorded when no row reached the model (it may not even exist)."""
    model = models_repo.get(session, model_name)
    if model is None:
        return
    audit.record(session, at=clock.now(), actor=actor, action=f"import.{kind}", target=model_name,
                 detail=detail, model_id=model.id)
