"""What a model's settings and rules were at any instant.

Every change of a model's settings (``models.service.put_settings``) or rules (the rule
use cases of ``alarms.service``) appends the whole new state, with who and when, to
``settings_versions``. A version is in force from its ``recorded_at`` until the next one of
the same subject. Histories start with this feature: before a model's first recorded change
its earlier state is recorded once (the "baseline", at the model's creation time), so every
instant since the model was created has a version; a model never changed since has none,
and its current state is the one in force.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

from calibrant.store import history_repo
from calibrant.store.history_tables import RULES, SETTINGS, SettingsVersion
from calibrant.store.tables import Model
from calibrant.store.unit import Session

BASELINE_ACTOR = "(state before history)"
SUBJECTS = (SETTINGS, RULES)


@dataclass(frozen=True, slots=True)
class InForce:
    """The state of one subject in force at an instant, and where it came from."""

    content: Any
    recorded_at: datetime | None  # None: never changed since history began (the current state)
    actor: str | None

    def to_dict(self) -> dict[str, Any]:
        return {"content": self.content, "recorded_at": self.recorded_at, "actor": self.actor}


def record_change(session: Session, model: Model, subject: str, *, before: Any, after: Any,
                  at: datetime, actor: str) -> None:
    """Append ``after`` as the subject's new version; first the baseline ``before`` if none yet."""
    if not history_repo.has_versions(session, model.id, subject):
        history_repo.add_version(session, model.id, subject, before, at=min(model.created_at, at),
                                 actor=BASELINE_ACTOR)
    history_repo.add_version(session, model.id, subject, after, at=at, actor=actor)


def in_force(session: Session, model: Model, subject: str, at: datetime, current: Any) -> InForce:
    """The subject's state at ``at``. ``current`` is today's state, used when nothing was recorded.

    An instant before the first version (before the model existed) gets the first version.
    """
    row: SettingsVersion | None = history_repo.version_at(session, model.id, subject, at)
    if row is None:
        row = history_repo.first_version(session, model.id, subject)
    if row is None:
        return InForce(current, None, None)
    return InForce(row.content, row.recorded_at, row.actor)


def version_out(row: SettingsVersion) -> dict[str, Any]:
    return {"subject": row.subject, "recorded_at": row.recorded_at, "actor": row.actor,
            "content": row.content}
