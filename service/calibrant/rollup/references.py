"""The reference a model's score drift (and later its degradation rule) is judged against.

Either a date range of the model's own traffic (``{"kind": "traffic", "start", "end",
"version"?}``, merged from stored hourly summaries) or an uploaded validation set
(``{"kind": "uploaded", ...}``, its summary stored apart from live traffic).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np
import orjson

from calibrant.clock import Clock, rfc3339
from calibrant.errors import FieldError, InvalidInput
from calibrant.models import history
from calibrant.models.service import require, settings_of
from calibrant.rollup.query import load_days
from calibrant.stats.summary import Summary
from calibrant.store import audit, rollup_repo
from calibrant.store.history_tables import SETTINGS
from calibrant.store.unit import Connection, Session
from calibrant.vocabulary.segments import ALL_SEGMENT

MAX_REFERENCE_ROWS = 1_000_000


MODEL_WIDE = (ALL_SEGMENT, ALL_SEGMENT)


def reference_summary(conn: Connection, model: Any, segment: tuple[str, str] = MODEL_WIDE) -> Summary | None:
    """Every prediction of the reference, labeled or not: what score drift compares with.

    A traffic reference is read for the segment asked (a segment value is compared with its own
    past, not with the pooled mix of every value); an uploaded set has no tags and serves every
    segment as it is.
    """
    ref = model.reference
    if not ref:
        return None
    if ref.get("kind") == "uploaded":
        payload = rollup_repo.reference_sample(conn, model.id)
        return None if payload is None else Summary.from_bytes(payload)
    return _traffic(conn, model, boundary=None, segment=segment)


def reference_outcome_summary(conn: Connection, model: Any, boundary: datetime | None,
                              segment: tuple[str, str] = MODEL_WIDE) -> Summary | None:
    """The reference's mature predictions, for the rules that judge outcomes (excess log-loss).

    A traffic reference keeps only its mature hours (the boundary of
    ``rollup.query.maturity_boundary``): an immature day would count outcomes
    not yet arrived. Whether an unlabeled mature row is an implicit 0 is the
    reader's choice (``Summary.labeled``), the same as for the periods judged.
    An uploaded set is returned whole: its labels are final.
    """
    ref = model.reference
    if not ref:
        return None
    if ref.get("kind") == "uploaded":
        return reference_summary(conn, model)
    return _traffic(conn, model, boundary=boundary, segment=segment)


def _traffic(conn: Connection, model: Any, *, boundary: datetime | None,
             segment: tuple[str, str]) -> Summary | None:
    ref = model.reference
    days = load_days(
        conn,
        model,
        datetime.fromisoformat(ref["start"]),
        datetime.fromisoformat(ref["end"]),
        segment=segment,
        version=ref.get("version"),
        boundary=boundary,
    )
    merged = Summary.merge_many(list(days.mature.values()))
    return None if merged.is_empty() else merged


def upload(session: Session, model_name: str, body: bytes, *, clock: Clock, actor: str) -> dict[str, Any]:
    """Store an uploaded validation set as the model's reference.

    Body: ``{"description"?: str, "probabilities": [..], "labels"?: [0/1 ..]}``;
    labels are optional because score drift needs none.
    """
    model = require(session, model_name)
    try:
        doc = orjson.loads(body)
    except orjson.JSONDecodeError as exc:
        raise InvalidInput("body is not valid JSON", [FieldError(None, "body", str(exc))]) from None
    if not isinstance(doc, dict):
        raise InvalidInput("body must be an object", [FieldError(None, "body", "expected an object")])
    errors = [
        FieldError(None, k, "unknown field")
        for k in sorted(set(doc) - {"description", "probabilities", "labels"})
    ]
    probs = doc.get("probabilities")
    labels = doc.get("labels")
    p = _numbers(probs, "probabilities", errors)
    y = None if labels is None else _numbers(labels, "labels", errors)
    if p is not None:
        if p.size == 0 or p.size > MAX_REFERENCE_ROWS:
            errors.append(FieldError(None, "probabilities", f"needs 1 to {MAX_REFERENCE_ROWS} values"))
        elif not (np.all(np.isfinite(p)) and p.min() >= 0 and p.max() <= 1):
            bad = int(np.flatnonzero(~(np.isfinite(p) & (p >= 0) & (p <= 1)))[0])
            errors.append(FieldError(bad, "probabilities", "must be numbers in [0, 1]"))
    if y is not None and p is not None:
        if y.size != p.size:
            errors.append(FieldError(None, "labels", "must have as many values as probabilities"))
        elif not np.all(np.isin(y, (0, 1))):
            errors.append(FieldError(int(np.flatnonzero(~np.isin(y, (0, 1)))[0]), "labels", "must be 0 or 1"))
    description = doc.get("description", "")
    if not isinstance(description, str) or len(description) > 500:
        errors.append(FieldError(None, "description", "must be a string of at most 500 characters"))
    if errors:
        raise InvalidInput("the reference set is invalid; nothing was stored", errors)
    assert p is not None  # _numbers gives None only after recording an error
    state = np.full(p.size, -1, dtype=np.int8) if y is None else y.astype(np.int8)
    summary = Summary.from_arrays(p, state)
    now = clock.now()
    before = settings_of(model)
    rollup_repo.save_reference_sample(
        session.connection(), model.id, int(p.size), summary.to_bytes(), description, now
    )
    model.reference = {
        "kind": "uploaded",
        "n": int(p.size),
        "labeled": y is not None,
        "description": description,
        "uploaded_at": rfc3339(now),
    }
    model.updated_at = now
    audit.record(
        session,
        at=now,
        actor=actor,
        action="model.reference_uploaded",
        target=model.name,
        detail={"n": int(p.size), "labeled": y is not None},
        model_id=model.id,
    )
    history.record_change(session, model, SETTINGS, before=before, after=settings_of(model), at=now,
                          actor=actor)
    session.flush()
    return {"model": model.name, "reference": model.reference}


def _numbers(values: object, field: str, errors: list[FieldError]) -> np.ndarray | None:
    if not isinstance(values, list):
        errors.append(FieldError(None, field, "required: a list of numbers"))
        return None
    if any(isinstance(v, bool) or not isinstance(v, int | float) for v in values):
        bad = next(i for i, v in enumerate(values) if isinstance(v, bool) or not isinstance(v, int | float))
        errors.append(FieldError(bad, field, "must be a number"))
        return None
    return np.asarray(values, dtype=np.float64)
