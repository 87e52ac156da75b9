"""Stored report snapshots, read back by (model, start, end, as_of).

A snapshot is the reproducible body exactly as generated (its canonical JSON, the bytes of
``content_hash``), so a report can be served for a period whose raw rows are gone.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import orjson

from calibrant.models.service import require
from calibrant.store import history_repo
from calibrant.store.unit import Session


def stored(session: Session, model_name: str, start: datetime, end: datetime,
           as_of: datetime) -> dict[str, Any] | None:
    """The latest stored body of this report with its ``content_hash``; None if never generated."""
    model = require(session, model_name)
    row = history_repo.find_snapshot(session, model.id, start, end, as_of)
    if row is None:
        return None
    return {**orjson.loads(row.body), "content_hash": row.content_hash}
