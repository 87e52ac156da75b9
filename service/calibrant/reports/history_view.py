"""``GET /v1/models/{model}/history``: the settings and rules in force at an instant, and the changes."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from calibrant.alarms.service import rules_snapshot
from calibrant.models import history
from calibrant.models.service import require, settings_of
from calibrant.store import history_repo
from calibrant.store.history_tables import RULES, SETTINGS
from calibrant.store.unit import Session


def in_force_at(session: Session, model_name: str, *, at: datetime | None, now: datetime) -> dict[str, Any]:
    model = require(session, model_name)
    when = at or now
    return {
        "model": model.name,
        "at": when,
        "settings": history.in_force(session, model, SETTINGS, when, settings_of(model)).to_dict(),
        "rules": history.in_force(session, model, RULES, when, rules_snapshot(session, model)).to_dict(),
        "versions": [history.version_out(v)
                     for v in history_repo.versions_between(session, model.id, None, when)],
    }
