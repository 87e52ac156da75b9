"""Monitoring-plan use cases: put a new version (audited), read the version in force or a numbered one.

Here rather than in ``models`` because a tolerance must name an existing rule, and a model's
default rules exist only once ``alarms.service.ensure_defaults`` has made them.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import ValidationError

from calibrant.alarms.service import ensure_defaults
from calibrant.errors import FieldError, InvalidInput, NotFound, field_errors
from calibrant.models.plan import MonitoringPlan, plan_out
from calibrant.models.service import require
from calibrant.store import alarm_repo, audit, history_repo
from calibrant.store.unit import Session


def put_plan(session: Session, model_name: str, body: bytes, *, actor: str, now: datetime) -> dict[str, Any]:
    """Validate and store the whole plan as the model's next version."""
    model = require(session, model_name)
    try:
        plan = MonitoringPlan.model_validate_json(body or b"{}")
    except ValidationError as exc:
        raise InvalidInput("the monitoring plan is invalid; nothing was changed", field_errors(exc)) from None
    ensure_defaults(session, model, now)
    missing = [
        FieldError(None, f"tolerances.{i}.rule",
                   f"model {model.name!r} has no rule {t.rule!r}; create it first")
        for i, t in enumerate(plan.tolerances)
        if alarm_repo.rule_named(session, model.id, t.rule) is None
    ]
    if missing:
        raise InvalidInput("a tolerance names a rule the model does not have; nothing was changed", missing)
    row = history_repo.add_plan(session, model.id, plan.model_dump(mode="json"), at=now, actor=actor)
    audit.record(session, at=now, actor=actor, action="plan.changed", target=model.name,
                 detail={"version": row.version}, model_id=model.id)
    session.flush()
    return plan_out(row, model.name)


def get_plan(session: Session, model_name: str, *, at: datetime | None, version: int | None,
             now: datetime) -> dict[str, Any]:
    """A numbered version, or the version in force at ``at`` (default: now)."""
    model = require(session, model_name)
    if version is not None:
        row = history_repo.plan_version(session, model.id, version)
        if row is None:
            raise NotFound(f"model {model.name!r} has no plan version {version}")
    else:
        row = history_repo.plan_at(session, model.id, at or now)
        if row is None:
            raise NotFound(f"model {model.name!r} had no monitoring plan then; set one with PUT")
    out = plan_out(row, model.name)
    out["versions"] = len(history_repo.plan_versions(session, model.id))
    return out
