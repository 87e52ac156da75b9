"""Models: lookup, creation on first ingest, settings, counts."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, cast

from sqlalchemy import func, select
from sqlalchemy.engine import CursorResult
from sqlalchemy.orm import Session

from calibrant.store.tables import Model, Outcome, Prediction
from calibrant.store.upsert import insert_for


def get(session: Session, name: str) -> Model | None:
    return session.scalars(select(Model).where(Model.name == name)).one_or_none()


def get_or_create(session: Session, name: str, now: datetime) -> tuple[Model, bool]:
    """The model called ``name``, created with default settings if new.

    Safe under concurrent first ingests: the INSERT ignores a name that
    another transaction inserted first, and we read whichever row won.
    """
    existing = get(session, name)
    if existing is not None:
        return existing, False
    values: dict[str, Any] = {
        "name": name,
        "description": "",
        "outcome_horizon_days": None,
        "outcome_lag_days": 0,
        "implicit_negatives": False,
        "segment_keys": [],
        "reference": None,
        "settings_generation": 1,
        "created_at": now,
        "updated_at": now,
    }
    # Session.execute is typed as returning a Result; for DML it is a CursorResult, which has rowcount.
    result = cast(CursorResult[Any], session.execute(
        insert_for(session.get_bind().dialect.name, Model)
        .values(**values)
        .on_conflict_do_nothing(index_elements=["name"])
    ))
    created = bool(result.rowcount)
    model = get(session, name)
    assert model is not None  # either we or a concurrent writer inserted it
    return model, created


def model_name(session: Session, model_id: int) -> str | None:
    """The name of the model with this id; None if there is none."""
    return session.scalar(select(Model.name).where(Model.id == model_id))


def list_all(session: Session) -> list[Model]:
    return list(session.scalars(select(Model).order_by(Model.name)))


@dataclass(frozen=True, slots=True)
class ModelCounts:
    predictions: int
    outcomes: int
    labeled: int  # predictions that have an outcome


def counts(session: Session, model_id: int) -> ModelCounts:
    n_pred = session.scalar(
        select(func.count()).select_from(Prediction).where(Prediction.model_id == model_id)
    )
    n_out = session.scalar(
        select(func.count()).select_from(Outcome).where(Outcome.model_id == model_id)
    )
    n_lab = session.scalar(
        select(func.count())
        .select_from(Prediction)
        .join(
            Outcome,
            (Outcome.model_id == Prediction.model_id) & (Outcome.case_id == Prediction.case_id),
        )
        .where(Prediction.model_id == model_id)
    )
    return ModelCounts(int(n_pred or 0), int(n_out or 0), int(n_lab or 0))


__all__ = ["ModelCounts", "counts", "get", "get_or_create", "list_all", "model_name"]
