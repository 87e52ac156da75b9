"""Model use cases: read, list, update settings (audited), look up a case."""

from __future__ import annotations

from typing import Any

from pydantic import ValidationError

from calibrant.clock import Clock
from calibrant.errors import FieldError, InvalidInput, NotFound, field_errors
from calibrant.models import history
from calibrant.models.settings import (
    SUMMARY_SETTINGS,
    ModelSettingsPatch,
    consistency_problem,
    merged,
)
from calibrant.store import audit, cases, dirty, models_repo
from calibrant.store.history_tables import SETTINGS
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.names import check_name

SETTING_NAMES = (
    "description",
    "outcome_horizon_days",
    "outcome_lag_days",
    "implicit_negatives",
    "segment_keys",
    "reference",
    "false_alarms_per_year",
    "retention_days",
)


def settings_of(model: Model) -> dict[str, Any]:
    return {name: getattr(model, name) for name in SETTING_NAMES}


def require(session: Session, name: str) -> Model:
    check_name(name)
    model = models_repo.get(session, name)
    if model is None:
        raise NotFound(f"no model named {name!r}; it is created by its first ingest or by PUT")
    return model


def parse_patch(body: bytes) -> tuple[ModelSettingsPatch, set[str]]:
    try:
        patch = ModelSettingsPatch.model_validate_json(body or b"{}")
    except ValidationError as exc:
        raise InvalidInput("the model settings are invalid; nothing was changed", field_errors(exc)) from None
    return patch, set(patch.model_fields_set)


def put_settings(
    session: Session, name: str, body: bytes, *, clock: Clock, actor: str
) -> tuple[Model, bool]:
    """Create or merge-update a model's settings. Returns (model, created)."""
    check_name(name)
    patch, fields_set = parse_patch(body)
    model, created = models_repo.get_or_create(session, name, clock.now())
    before = settings_of(model)
    after = merged(before, patch, fields_set)
    problem = consistency_problem(after)
    if problem:
        field, why = problem
        raise InvalidInput(why, [FieldError(None, field, why)])
    changed = {k: {"from": before[k], "to": after[k]} for k in SETTING_NAMES if before[k] != after[k]}
    for key, value in after.items():
        setattr(model, key, value)
    if any(k in changed for k in SUMMARY_SETTINGS):
        model.settings_generation += 1
        dirty.mark_whole_model(session.connection(), model.id, clock.now())
    if changed or created:
        model.updated_at = clock.now()
        audit.record(
            session,
            at=clock.now(),
            actor=actor,
            action="model.created" if created else "model.settings_changed",
            target=name,
            detail={"changes": changed},
            model_id=model.id,
        )
        history.record_change(session, model, SETTINGS, before=_json_ready(before),
                              after=_json_ready(after), at=clock.now(), actor=actor)
    session.flush()
    return model, created


def _json_ready(settings: dict[str, Any]) -> dict[str, Any]:
    """Settings as stored in a JSON column (lists copied so later edits cannot alias)."""
    return {k: list(v) if isinstance(v, list) else v for k, v in settings.items()}


def case_record(session: Session, name: str, case_id: str) -> cases.CaseRecord:
    model = require(session, name)
    record = cases.load(session, model.id, case_id)
    if not record.found:
        raise NotFound(f"model {name!r} has no prediction or outcome with id {case_id!r}")
    return record
