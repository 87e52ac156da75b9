"""Reading the audit trail: who changed what and when, filtered and paged, newest first."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from calibrant.errors import invalid
from calibrant.models.service import require
from calibrant.store import audit
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import required_instant

MAX_PAGE = 1000


def _optional_instant(name: str, text: str | None) -> datetime | None:
    return None if text is None else required_instant(name, text)


def events(
    session: Session,
    *,
    model: str | None,
    actor: str | None,
    action: str | None,
    start: str | None,
    end: str | None,
    before_id: int | None,
    limit: int,
) -> dict[str, Any]:
    """One page of events; ``next_before_id`` continues the listing, null on the last page."""
    if not 1 <= limit <= MAX_PAGE:
        raise invalid("limit", f"must be between 1 and {MAX_PAGE}")
    if before_id is not None and before_id < 1:
        raise invalid("before_id", "must be a positive event id, as a page's next_before_id gives it")
    lo, hi = _optional_instant("start", start), _optional_instant("end", end)
    if lo is not None and hi is not None and hi <= lo:
        raise invalid("end", "must be after start")
    model_id = require(session, model).id if model is not None else None
    # One more row than asked tells whether another page exists, without a count query.
    rows = audit.search(session, model_id=model_id, actor=actor, action=action, start=lo, end=hi,
                        before_id=before_id, limit=limit + 1)
    page = rows[:limit]
    return {
        "events": [
            {"id": e.id, "at": e.at, "actor": e.actor, "action": e.action, "target": e.target,
             "model": name, "detail": e.detail or {}}
            for e, name in page
        ],
        "count": len(page),
        "next_before_id": page[-1][0].id if len(rows) > limit else None,
    }
