"""Alarm use cases: rules (defaults, CRUD, self-description), listing alarms, a person resolving one.

Above the evaluations and the alarm records: a person's resolve restarts a
chart (``charts.restart_alarm_stream``) and then resolves the record
(``records.resolve``), so the record module never needs the charts. Services
flush, never commit: an alarm's state change and its outbox event are written
in the caller's one transaction. Default rules are created lazily, once per
model, the first time its rules are listed or evaluated (``AlarmModelState``
remembers it, so a deleted default stays deleted).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import ValidationError

from calibrant.alarms import budget, charts, kinds, records
from calibrant.alarms.kinds import DEFAULT_RULES, Kind
from calibrant.errors import Conflict, FieldError, InvalidInput, NotFound, field_errors, invalid
from calibrant.models import history
from calibrant.models.service import require
from calibrant.store import alarm_repo, audit, rollup_repo
from calibrant.store.alarm_tables import OPEN, RESOLVED, Alarm, AlarmModelState, AlarmRule
from calibrant.store.history_tables import RULES
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.names import NAME_PATTERN, is_name
from calibrant.vocabulary.segments import parse_tag


# ----------------------------------------------------------------------------- rules
def ensure_defaults(session: Session, model: Model, now: datetime) -> None:
    """Create the default rules the first time a model's rules are needed."""
    if session.get(AlarmModelState, model.id) is not None:
        return
    if not alarm_repo.claim_model_state(session, model.id, now):
        return  # another transaction (perhaps another server process) made them first
    for name, kind, params in DEFAULT_RULES:
        if alarm_repo.rule_named(session, model.id, name) is None:
            session.add(AlarmRule(model_id=model.id, name=name, kind=kind.value,
                                  params=kinds.parse_params(kind, params).model_dump(), enabled=True,
                                  is_default=True, created_at=now, updated_at=now))
    session.flush()
    history.record_change(session, model, RULES, before=[], after=rules_snapshot(session, model), at=now,
                          actor="(default rules)")
    session.flush()


def rules_snapshot(session: Session, model: Model) -> list[dict[str, Any]]:
    """The model's rules as kept in its settings history: name, kind, params, enabled."""
    return [{"name": r.name, "kind": r.kind, "params": dict(r.params), "enabled": r.enabled}
            for r in alarm_repo.rules_of(session, model.id)]


def window_streams(session: Session, model: Model) -> int:
    """Versions × (1 + segment values): how many streams a window rule tests each period."""
    conn = session.connection()
    versions = len(alarm_repo.versions_of(conn, model.id)) or 1
    values = sum(len(v) for v in rollup_repo.segment_values(conn, model.id).values())
    return versions * (1 + values)


def rule_out(session: Session, model: Model, rule: AlarmRule, split: budget.Budget) -> dict[str, Any]:
    kind = kinds.spec(rule.kind)
    params = kind.params.model_validate(rule.params)
    share = split.shares.get(rule.name)
    if kind.evaluation == "chart":
        streams = len(alarm_repo.streams_of(session, rule.id))
    else:
        streams = window_streams(session, model)
    out: dict[str, Any] = {
        "name": rule.name, "kind": Kind(rule.kind).value, "enabled": rule.enabled,
        "is_default": rule.is_default, "params": params.model_dump(),
        **kind.describe(params),
        "false_alarms": {
            "share_per_year": None if share is None else share.share_per_year,
            "basis": None if share is None else share.basis,
            "statement": "disabled: no share of the budget" if not rule.enabled else budget.statement(
                share, kind.evaluation, getattr(params, "granularity", None), streams),
        },
        "created_at": rule.created_at, "updated_at": rule.updated_at,
    }
    if kind.evaluation == "chart":
        out["streams"] = [_stream_out(s) for s in alarm_repo.streams_of(session, rule.id)]
    elif kind.evaluation == "window":
        out["evaluated_through"] = rule.evaluated_through
    return out


def _stream_out(stream: Any) -> dict[str, Any]:
    state = stream.state or {}
    return {
        "version": stream.version, "segment": records.segment_out(stream.segment_key, stream.segment_value),
        "designed": stream.state is not None, "cusum_statistic": state.get("s"),
        "control_limit": state.get("h"),
        # Before its design a stream's chart has not started: no case fed since a reset.
        "cases_since_reset": state.get("n_cases", 0), "consumed": stream.consumed,
        "skipped_late": stream.skipped_late, "unlabeled_at_maturity": stream.unlabeled_at_maturity,
        "watermark_at": stream.watermark_at, "design_error": (stream.design or {}).get("error"),
    }


def list_rules(session: Session, model_name: str, now: datetime) -> dict[str, Any]:
    """The model's rules and how its one false-alarm budget is split over them."""
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    split = budget.of_model(session, model)
    rules = [rule_out(session, model, r, split) for r in alarm_repo.rules_of(session, model.id)]
    return {"rules": rules, "budget": split.to_dict()}


def _rule(session: Session, model: Model, name: str) -> AlarmRule:
    rule = alarm_repo.rule_named(session, model.id, name)
    if rule is None:
        raise NotFound(f"model {model.name!r} has no rule {name!r}")
    return rule


def get_rule(session: Session, model_name: str, name: str, now: datetime) -> dict[str, Any]:
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    return rule_out(session, model, _rule(session, model, name), budget.of_model(session, model))


def _validated(kind_text: Any, params: Any) -> tuple[Kind, dict[str, Any]]:
    try:
        kind = Kind(kind_text)
    except ValueError:
        raise invalid("kind", f"must be one of {', '.join(k.value for k in Kind)}") from None
    if not isinstance(params, dict):
        raise invalid("params", "must be an object")
    try:
        return kind, kinds.KINDS[kind].params.model_validate(params).model_dump()
    except ValidationError as exc:
        raise InvalidInput("the rule parameters are invalid; nothing was changed",
                           field_errors(exc, prefix="params")) from None


def create_rule(session: Session, model_name: str, body: dict[str, Any], *, actor: str,
                now: datetime) -> dict[str, Any]:
    """Body ``{"name", "kind", "params"?, "enabled"?}``."""
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    unknown = set(body) - {"name", "kind", "params", "enabled"}
    if unknown:
        raise InvalidInput("unknown fields", [FieldError(None, k, "unknown field") for k in sorted(unknown)])
    name = body.get("name")
    if not isinstance(name, str) or not is_name(name):
        raise invalid("name", f"required, matching {NAME_PATTERN}")
    if alarm_repo.rule_named(session, model.id, name) is not None:
        raise Conflict(f"rule {name!r} exists; change it with PUT", [{"name": name}])
    kind, params = _validated(body.get("kind"), body.get("params", {}))
    enabled = body.get("enabled", True)
    if not isinstance(enabled, bool):
        raise invalid("enabled", "must be true or false")
    before_rules = rules_snapshot(session, model)
    rule = AlarmRule(model_id=model.id, name=name, kind=kind.value, params=params, enabled=enabled,
                     is_default=False, created_at=now, updated_at=now)
    session.add(rule)
    session.flush()
    history.record_change(session, model, RULES, before=before_rules, after=rules_snapshot(session, model),
                          at=now, actor=actor)
    audit.record(session, at=now, actor=actor, action="rule.created", target=f"{model.name}/{name}",
                 detail={"kind": kind.value, "params": params, "enabled": enabled}, model_id=model.id)
    session.flush()
    return rule_out(session, model, rule, budget.of_model(session, model))


def update_rule(session: Session, model_name: str, name: str, body: dict[str, Any], *, actor: str,
                now: datetime) -> dict[str, Any]:
    """Body ``{"params"?, "enabled"?}``; params are merged over the current ones."""
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    rule = _rule(session, model, name)
    unknown = set(body) - {"params", "enabled"}
    if unknown:
        raise InvalidInput("unknown fields; the name and kind of a rule are fixed",
                           [FieldError(None, k, "unknown or fixed field") for k in sorted(unknown)])
    before = {"params": dict(rule.params), "enabled": rule.enabled}
    before_rules = rules_snapshot(session, model)
    if "params" in body:
        if not isinstance(body["params"], dict):
            raise invalid("params", "must be an object")
        _, rule.params = _validated(rule.kind, {**rule.params, **body["params"]})
    if "enabled" in body:
        if not isinstance(body["enabled"], bool):
            raise invalid("enabled", "must be true or false")
        rule.enabled = body["enabled"]
    after = {"params": rule.params, "enabled": rule.enabled}
    if after != before:
        rule.updated_at = now
        if kinds.evaluated_as(rule.kind, "chart") and after["params"] != before["params"]:
            alarm_repo.delete_rule_state(session, rule.id)  # new parameters: charts start afresh
        audit.record(session, at=now, actor=actor, action="rule.changed", target=f"{model.name}/{name}",
                     detail={"from": before, "to": after}, model_id=model.id)
        session.flush()
        history.record_change(session, model, RULES, before=before_rules,
                              after=rules_snapshot(session, model), at=now, actor=actor)
    session.flush()
    return rule_out(session, model, rule, budget.of_model(session, model))


def delete_rule(session: Session, model_name: str, name: str, *, actor: str, now: datetime) -> None:
    """Delete a rule and its chart state; its open alarms are resolved (events written)."""
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    rule = _rule(session, model, name)
    before_rules = rules_snapshot(session, model)
    for alarm in alarm_repo.open_alarms_of_rule(session, rule.id):
        records.resolve(session, model, alarm, now=now, by=actor, resolution={"reason": "rule deleted"})
    alarm_repo.delete_rule_state(session, rule.id)
    session.delete(rule)
    audit.record(session, at=now, actor=actor, action="rule.deleted", target=f"{model.name}/{name}",
                 detail={"kind": rule.kind, "params": rule.params}, model_id=model.id)
    session.flush()
    history.record_change(session, model, RULES, before=before_rules, after=rules_snapshot(session, model),
                          at=now, actor=actor)
    session.flush()


# ----------------------------------------------------------------------------- alarms
def resolve_by_person(session: Session, model_name: str, alarm_id: int, *, actor: str, note: str,
                      now: datetime) -> Alarm:
    """Resolve an open alarm (audited); a chart alarm restarts its chart at S = 0."""
    model = require(session, model_name)
    alarm = alarm_repo.alarm(session, model.id, alarm_id)
    if alarm is None:
        raise NotFound(f"model {model.name!r} has no alarm {alarm_id}")
    if alarm.state != OPEN:
        raise Conflict(f"alarm {alarm_id} is already resolved", [{"id": alarm_id, "state": alarm.state}])
    restarted = charts.restart_alarm_stream(session, model, alarm, now)
    records.resolve(session, model, alarm, now=now, by=actor,
                    resolution={"reason": "resolved by a person", "note": note, "chart_restarted": restarted})
    audit.record(session, at=now, actor=actor, action="alarm.resolved", target=f"{model.name}/{alarm.id}",
                 detail={"rule": alarm.rule_name, "note": note, "chart_restarted": restarted},
                 model_id=model.id)
    session.flush()
    return alarm


def alarm_out(alarm: Alarm) -> dict[str, Any]:
    return {
        "id": alarm.id, "rule": alarm.rule_name, "state": alarm.state, **records.version_scope(alarm.version),
        "segment": records.segment_out(alarm.segment_key, alarm.segment_value), "summary": alarm.summary,
        "crossed_at": alarm.crossed_at, "opened_at": alarm.opened_at, "resolved_at": alarm.resolved_at,
        "resolved_by": alarm.resolved_by, "resolution": alarm.resolution, "evidence": alarm.evidence,
        "budget_share_per_year": (alarm.evidence or {}).get("budget_share_per_year"),
        "restatements": list(alarm.restatements or []),
    }


def list_alarms(session: Session, model_name: str, *, state: str | None, rule: str | None,
                version: str | None, tag: str | None, limit: int) -> list[dict[str, Any]]:
    model = require(session, model_name)
    if state is not None and state not in (OPEN, RESOLVED):
        raise invalid("state", "must be open or resolved")
    segment = None
    if tag is not None:
        segment = parse_tag("tag", tag)
    if not 1 <= limit <= 1000:
        raise invalid("limit", "must be between 1 and 1000")
    rows = alarm_repo.list_alarms(session, model.id, state=state, rule=rule, version=version,
                                  segment=segment, limit=limit)
    return [alarm_out(a) for a in rows]
