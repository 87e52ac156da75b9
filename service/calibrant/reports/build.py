"""``GET /v1/models/{model}/report``: a model's monitoring over [start, end) as known at ``as_of``.

The body is everything the service knew at ``as_of`` (rows received by then, labels known
then, the settings, rules and plan in force then, alarms and deliveries as recorded then);
its canonical JSON (sorted keys, times as RFC 3339 ``Z``) is hashed (SHA-256) into
``content_hash`` and stored as a snapshot. Rebuilding the same (model, start, end, as_of)
later gives the same body and hash. ``restatements`` is the one part that looks past
``as_of``: what arrived after it for the span, and which figures that data changes.

A span reaching before the model's retention boundary cannot be rebuilt (its raw rows are
gone): it is served from the snapshot stored when it was generated, and refused (409) when
none was (docs/retention.md).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import orjson

from calibrant.alarms.service import rules_snapshot
from calibrant.clock import rfc3339
from calibrant.errors import Conflict, invalid
from calibrant.models import history
from calibrant.models.service import require, settings_of
from calibrant.reports import numbers, sections
from calibrant.stats.summary import Summary
from calibrant.store import as_of_rows, history_repo, rollup_repo
from calibrant.store.as_of_rows import KnownRows
from calibrant.store.history_tables import RULES, SETTINGS
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import parse_instant, required_instant

MAX_SPAN = timedelta(days=5 * 366)
CAUTION = (
    "Monitoring signals support, and do not replace, model validation, local regulation and "
    "qualified review of the decisions this model informs."
)


@dataclass(frozen=True, slots=True)
class Report:
    body: dict[str, Any]  # canonical: times as RFC 3339 text
    restatements: dict[str, Any]
    snapshot_id: int
    generated_at: datetime

    def document(self) -> dict[str, Any]:
        """The JSON answer: the reproducible body, then what is particular to this generation."""
        return {**self.body, "restatements": self.restatements, "snapshot_id": self.snapshot_id,
                "generated_at": rfc3339(self.generated_at)}


def canonical(value: Any) -> bytes:
    """Sorted keys, times as RFC 3339 in UTC ending in Z: the bytes the content hash is taken of."""
    return orjson.dumps(value, default=_as_text,
                        option=orjson.OPT_SORT_KEYS | orjson.OPT_PASSTHROUGH_DATETIME)


def _as_text(value: Any) -> str:
    if isinstance(value, datetime):
        return rfc3339(value)
    raise TypeError(f"not JSON: {type(value).__name__}")


def content_hash(body: dict[str, Any]) -> str:
    return hashlib.sha256(canonical(body)).hexdigest()


def _span(start: str | None, end: str | None, as_of: str | None, now: datetime) -> tuple[datetime, ...]:
    lo, hi = required_instant("start", start), required_instant("end", end)
    if hi <= lo:
        raise invalid("end", "must be after start")
    if hi - lo > MAX_SPAN:
        raise invalid("end", "a report covers at most five years")
    when = now
    if as_of is not None:
        parsed = parse_instant(as_of)
        if isinstance(parsed, str):
            raise invalid("as_of", parsed)
        if parsed > now:
            raise invalid("as_of", "must not be in the future: data may still arrive for it")
        when = parsed
    return lo, hi, when


def model_as_configured(model: Model, settings: dict[str, Any]) -> Model:
    """A detached copy of the model row carrying the settings in force (never added to a session)."""
    known = {k: v for k, v in settings.items() if k in Model.__table__.columns}
    return Model(id=model.id, name=model.name, created_at=model.created_at, updated_at=model.updated_at,
                 settings_generation=model.settings_generation, **known)


def _references(session: Session, model: Model, then: Model, as_of: datetime) -> numbers.References:
    ref = then.reference
    if not ref:
        return numbers.References(None, {}, None)
    conn = session.connection()
    if ref.get("kind") == "uploaded":
        current = model.reference or {}
        if current.get("kind") == "uploaded" and current.get("uploaded_at") == ref.get("uploaded_at"):
            payload = rollup_repo.reference_sample(conn, model.id)
            if payload is not None:
                return numbers.reference_summaries(None, Summary.from_bytes(payload), None)
        return numbers.References(None, {}, "the uploaded reference in force at as_of has since been "
                                             "replaced; score drift against it cannot be rebuilt")
    rows: KnownRows = as_of_rows.known_rows(
        conn, model.id, datetime.fromisoformat(ref["start"]), datetime.fromisoformat(ref["end"]), as_of,
        version=ref.get("version"), segment_keys=list(then.segment_keys or []))
    return numbers.reference_summaries(rows, None, None)


def build(session: Session, model_name: str, *, start: str | None, end: str | None, as_of: str | None,
          now: datetime, actor: str) -> Report:
    model = require(session, model_name)
    lo, hi, when = _span(start, end, as_of, now)
    if model.pruned_before is not None and lo < model.pruned_before:
        return _from_snapshot(session, model, lo, hi, when, now)
    settings = history.in_force(session, model, SETTINGS, when, settings_of(model))
    rules = history.in_force(session, model, RULES, when, rules_snapshot(session, model))
    plan_row = history_repo.plan_at(session, model.id, when)
    plan = None if plan_row is None else {"version": plan_row.version, "recorded_at": plan_row.recorded_at,
                                          "recorded_by": plan_row.actor, **plan_row.content}
    then = model_as_configured(model, settings.content)
    references = _references(session, model, then, when)
    rows = as_of_rows.known_rows(session.connection(), model.id, lo, hi, when,
                                 segment_keys=list(then.segment_keys or []), labels_settled=when >= now)
    figures = numbers.figures(rows, then, lo, hi, when, references)
    body = {
        "model": model.name,
        "start": lo, "end": hi, "as_of": when,
        "caution": CAUTION,
        "plan": plan,
        "settings_in_force": settings.to_dict(),
        "rules_in_force": rules.to_dict(),
        "reference_note": references.note,
        "tolerances": numbers.tolerance_checks(plan, figures["overall"], figures["periods"]),
        **figures,
        "alarms": sections.alarms(session, model.id, lo, hi, when),
        "deliveries": sections.deliveries(session, model.id, lo, hi, when),
        "changes_since_previous": sections.changes_since_previous(
            session, model.id, lo, when, None if plan is None else plan["version"], figures["overall"]),
    }
    text = canonical(body)
    body = orjson.loads(text)
    digest = hashlib.sha256(text).hexdigest()
    body["content_hash"] = digest
    snapshot = history_repo.save_snapshot(session, model.id, lo, hi, when, digest, text.decode(),
                                          at=now, actor=actor)
    restated = restatements(session, model, then, lo, hi, when, now, references, figures)
    return Report(body, orjson.loads(canonical(restated)), snapshot.id, now)


def _from_snapshot(session: Session, model: Model, start: datetime, end: datetime, as_of: datetime,
                   now: datetime) -> Report:
    """The stored report of a span whose raw rows retention removed (in part)."""
    boundary = model.pruned_before
    assert boundary is not None  # the caller checked
    row = history_repo.find_snapshot(session, model.id, start, end, as_of)
    if row is None:
        raise Conflict(
            f"raw rows of {model.name!r} scored before {rfc3339(boundary)} were removed by its retention, "
            "so a report reaching before then is served only from a snapshot stored when it was generated, "
            "and none was stored for this start, end and as_of",
            [{"field": "start", "pruned_before": rfc3339(boundary)}],
        )
    body = {**orjson.loads(row.body), "content_hash": row.content_hash}
    later = as_of_rows.arrived_after(session.connection(), model.id, start, end, as_of) if as_of < now \
        else as_of_rows.ArrivedLater(0, 0, 0)
    restated = {
        "checked_at": now,
        "arrived_after_as_of": {"predictions": later.predictions, "first_labels": later.first_labels,
                                "corrections": later.corrections},
        "changed": [],
        "note": f"served from the stored snapshot: raw rows before {rfc3339(boundary)} were removed by "
                "retention, so the figures cannot be recomputed; arrivals count the rows still kept",
    }
    return Report(body, orjson.loads(canonical(restated)), row.id, now)


def restatements(session: Session, model: Model, then: Model, start: datetime, end: datetime,
                 as_of: datetime, now: datetime, references: numbers.References,
                 figures: dict[str, Any]) -> dict[str, Any]:
    """What arrived after ``as_of`` for the span, and each headline figure it changes.

    The figures are recomputed with everything known at ``now`` but the settings, reference
    and maturity of ``as_of``, so that a difference is the late data's doing, not time's.
    """
    conn = session.connection()
    # Rows are stamped with the service's own clock when received: nothing arrives after now.
    later = (as_of_rows.ArrivedLater(0, 0, 0) if as_of >= now
             else as_of_rows.arrived_after(conn, model.id, start, end, as_of))
    arrived = {"predictions": later.predictions, "first_labels": later.first_labels,
               "corrections": later.corrections}
    changed: list[dict[str, Any]] = []
    if any(arrived.values()):
        rows = as_of_rows.known_rows(conn, model.id, start, end, now,
                                     segment_keys=list(then.segment_keys or []), labels_settled=True)
        current = orjson.loads(canonical(numbers.figures(rows, then, start, end, as_of, references)))
        known = orjson.loads(canonical({"periods": figures["periods"], "overall": figures["overall"]}))
        changed += _differences(None, known["overall"], current["overall"])
        for old, new in zip(known["periods"], current["periods"], strict=True):
            changed += _differences(old, old, new)
    return {"checked_at": now, "arrived_after_as_of": arrived, "changed": changed}


def _differences(period: dict[str, Any] | None, old: dict[str, Any],
                 new: dict[str, Any]) -> list[dict[str, Any]]:
    where = ({"scope": "whole_span", "start": None, "end": None} if period is None
             else {"scope": "week", "start": period["start"], "end": period["end"]})
    return [{**where, "metric": key, "as_of_value": old.get(key), "current_value": new.get(key)}
            for key in numbers.HEADLINE if old.get(key) != new.get(key)]
