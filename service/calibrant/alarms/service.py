"""Alarm use cases: rules (defaults, CRUD), opening and resolving alarms, each change into the outbox.

Services flush, never commit: an alarm's state change and its outbox event are
written in the caller's one transaction, so the event exists exactly when the
change does. Default rules are created lazily, once per model, the first time
its rules are listed or evaluated (``AlarmModelState`` remembers it, so a
deleted default stays deleted).
"""

from __future__ import annotations

import re
from datetime import datetime, timedelta
from typing import Any

from pydantic import ValidationError
from sqlalchemy.orm import Session

from calibrant.alarms import charts
from calibrant.alarms.rules import DEFAULT_RULES, PARAMS, ChartParams, Kind, describe, parse_params
from calibrant.errors import Conflict, FieldError, InvalidInput, NotFound, invalid
from calibrant.models.service import require
from calibrant.notify import outbox, payloads
from calibrant.store import alarm_repo, audit, rollup_repo
from calibrant.store.alarm_tables import OPEN, RESOLVED, Alarm, AlarmModelState, AlarmRule
from calibrant.store.rollup_tables import ALL_SEGMENT
from calibrant.store.tables import Model

ALL_VERSIONS = ""  # stored version of a model-wide (feed) alarm: no posted version is empty

RULE_NAME_PATTERN = r"^[a-z0-9][a-z0-9_-]{0,63}$"


# ----------------------------------------------------------------------------- rules
def ensure_defaults(session: Session, model: Model, now: datetime) -> None:
    """Create the default rules the first time a model's rules are needed."""
    if session.get(AlarmModelState, model.id) is not None:
        return
    session.add(AlarmModelState(model_id=model.id, defaults_created_at=now))
    for name, kind, params in DEFAULT_RULES:
        if alarm_repo.rule_named(session, model.id, name) is None:
            session.add(AlarmRule(model_id=model.id, name=name, kind=kind.value,
                                  params=parse_params(kind, params).model_dump(), enabled=True,
                                  is_default=True, created_at=now, updated_at=now))
    session.flush()


def chart_rules(session: Session, model: Model) -> list[tuple[AlarmRule, ChartParams]]:
    return [(r, ChartParams.model_validate(r.params)) for r in alarm_repo.rules_of(session, model.id)
            if r.enabled and r.kind == Kind.CHART]


def window_streams(session: Session, model: Model) -> int:
    """Versions × (1 + segment values): how many streams a window rule tests each period."""
    conn = session.connection()
    versions = len(alarm_repo.versions_of(conn, model.id)) or 1
    values = sum(len(v) for v in rollup_repo.segment_values(conn, model.id).values())
    return versions * (1 + values)


def rule_out(session: Session, model: Model, rule: AlarmRule) -> dict[str, Any]:
    kind = Kind(rule.kind)
    params = parse_params(kind, rule.params)
    n_chart = max(charts.count_streams(session, chart_rules(session, model)), 1)
    out: dict[str, Any] = {
        "name": rule.name, "kind": kind.value, "enabled": rule.enabled, "is_default": rule.is_default,
        "params": params.model_dump(),
        **describe(kind, params, streams=window_streams(session, model), chart_streams=n_chart),
        "created_at": rule.created_at, "updated_at": rule.updated_at,
    }
    if kind is Kind.CHART:
        out["streams"] = [_stream_out(s) for s in alarm_repo.streams_of(session, rule.id)]
    elif kind is not Kind.STARVATION:
        out["evaluated_through"] = rule.evaluated_through
    return out


def _stream_out(stream: Any) -> dict[str, Any]:
    state = stream.state or {}
    return {
        "version": stream.version, "segment": _segment(stream.segment_key, stream.segment_value),
        "designed": stream.state is not None, "cusum_statistic": state.get("s"),
        "control_limit": state.get("h"),
        # Before its design a stream's chart has not started: no case fed since a reset.
        "cases_since_reset": state.get("n_cases", 0), "consumed": stream.consumed,
        "skipped_late": stream.skipped_late, "unlabeled_at_maturity": stream.unlabeled_at_maturity,
        "watermark_at": stream.watermark_at, "design_error": (stream.design or {}).get("error"),
    }


def _segment(key: str, value: str) -> dict[str, str] | None:
    return None if key == ALL_SEGMENT else {"key": key, "value": value}


def list_rules(session: Session, model_name: str, now: datetime) -> list[dict[str, Any]]:
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    return [rule_out(session, model, r) for r in alarm_repo.rules_of(session, model.id)]


def _rule(session: Session, model: Model, name: str) -> AlarmRule:
    rule = alarm_repo.rule_named(session, model.id, name)
    if rule is None:
        raise NotFound(f"model {model.name!r} has no rule {name!r}")
    return rule


def get_rule(session: Session, model_name: str, name: str, now: datetime) -> dict[str, Any]:
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    return rule_out(session, model, _rule(session, model, name))


def _validated(kind_text: Any, params: Any) -> tuple[Kind, dict[str, Any]]:
    try:
        kind = Kind(kind_text)
    except ValueError:
        raise invalid("kind", f"must be one of {', '.join(k.value for k in Kind)}") from None
    if not isinstance(params, dict):
        raise invalid("params", "must be an object")
    try:
        return kind, PARAMS[kind].model_validate(params).model_dump()
    except ValidationError as exc:
        errors = [FieldError(None, "params." + ".".join(str(p) for p in e["loc"]) if e["loc"] else "params",
                             e["msg"]) for e in exc.errors(include_url=False)]
        raise InvalidInput("the rule parameters are invalid; nothing was changed", errors) from None


def create_rule(session: Session, model_name: str, body: dict[str, Any], *, actor: str,
                now: datetime) -> dict[str, Any]:
    """Body ``{"name", "kind", "params"?, "enabled"?}``."""
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    unknown = set(body) - {"name", "kind", "params", "enabled"}
    if unknown:
        raise InvalidInput("unknown fields", [FieldError(None, k, "unknown field") for k in sorted(unknown)])
    name = body.get("name")
    if not isinstance(name, str) or not re.fullmatch(RULE_NAME_PATTERN, name):
        raise invalid("name", f"required, matching {RULE_NAME_PATTERN}")
    if alarm_repo.rule_named(session, model.id, name) is not None:
        raise Conflict(f"rule {name!r} exists; change it with PUT", [{"name": name}])
    kind, params = _validated(body.get("kind"), body.get("params", {}))
    enabled = body.get("enabled", True)
    if not isinstance(enabled, bool):
        raise invalid("enabled", "must be true or false")
    rule = AlarmRule(model_id=model.id, name=name, kind=kind.value, params=params, enabled=enabled,
                     is_default=False, created_at=now, updated_at=now)
    session.add(rule)
    audit.record(session, at=now, actor=actor, action="rule.created", target=f"{model.name}/{name}",
                 detail={"kind": kind.value, "params": params, "enabled": enabled}, model_id=model.id)
    session.flush()
    return rule_out(session, model, rule)


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
        if rule.kind == Kind.CHART and after["params"] != before["params"]:
            alarm_repo.delete_rule_state(session, rule.id)  # new parameters: charts start afresh
        audit.record(session, at=now, actor=actor, action="rule.changed", target=f"{model.name}/{name}",
                     detail={"from": before, "to": after}, model_id=model.id)
    session.flush()
    return rule_out(session, model, rule)


def delete_rule(session: Session, model_name: str, name: str, *, actor: str, now: datetime) -> None:
    """Delete a rule and its chart state; its open alarms are resolved (events written)."""
    model = require(session, model_name)
    ensure_defaults(session, model, now)
    rule = _rule(session, model, name)
    for alarm in alarm_repo.open_alarms_of_rule(session, rule.id):
        _resolve(session, model, alarm, now=now, by=actor, resolution={"reason": "rule deleted"})
    alarm_repo.delete_rule_state(session, rule.id)
    session.delete(rule)
    audit.record(session, at=now, actor=actor, action="rule.deleted", target=f"{model.name}/{name}",
                 detail={"kind": rule.kind, "params": rule.params}, model_id=model.id)
    session.flush()


# ----------------------------------------------------------------------------- alarms
def version_scope(stored: str) -> dict[str, str | None]:
    """How a stream's version reads in the API: a model-wide stream has no version, it has a scope."""
    if stored == ALL_VERSIONS:
        return {"version": None, "scope": "all_versions"}
    return {"version": stored, "scope": "version"}


def open_key(rule_id: int, version: str, segment: tuple[str, str]) -> str:
    return f"{rule_id}|{version}|{segment[0]}|{segment[1]}"


def open_alarm(session: Session, model: Model, rule: AlarmRule, *, version: str, segment: tuple[str, str],
               crossed_at: datetime, evidence: dict[str, Any], summary: str, now: datetime) -> Alarm | None:
    """Open an alarm unless one is open for (rule, version, segment); write ``alarm.opened``."""
    key = open_key(rule.id, version, segment)
    if alarm_repo.open_alarm_for(session, key) is not None:
        return None
    alarm = Alarm(model_id=model.id, rule_id=rule.id, rule_name=rule.name, version=version,
                  segment_key=segment[0], segment_value=segment[1], state=OPEN, open_key=key,
                  summary=summary, evidence=evidence, crossed_at=crossed_at, opened_at=now)
    session.add(alarm)
    session.flush()
    _announce(session, model, alarm, payloads.ALARM_OPENED, now)
    return alarm


def _metrics_link(model: Model, alarm: Alarm) -> str:
    evidence = alarm.evidence or {}
    if "period_start" in evidence:
        start = datetime.fromisoformat(evidence["period_start"])
        end = datetime.fromisoformat(evidence["period_end"])
        grain = evidence.get("granularity", "week")
    else:
        end = alarm.crossed_at + timedelta(days=1)
        start = end - timedelta(days=28)
        grain = "day"
    segment = None if alarm.segment_key == ALL_SEGMENT else (alarm.segment_key, alarm.segment_value)
    return payloads.metrics_query(model.name, start=start, end=end, granularity=grain,
                                  version=version_scope(alarm.version)["version"], segment=segment)


def _announce(session: Session, model: Model, alarm: Alarm, kind: str, now: datetime) -> None:
    segment = None if alarm.segment_key == ALL_SEGMENT else (alarm.segment_key, alarm.segment_value)
    data = payloads.alarm_data(
        alarm_id=alarm.id, rule=alarm.rule_name, state=alarm.state, model=model.name,
        version=version_scope(alarm.version)["version"], segment=segment, evidence=alarm.evidence,
        metrics_query=_metrics_link(model, alarm), opened_at=alarm.opened_at,
        resolved_at=alarm.resolved_at, summary=alarm.summary,
    )
    outbox.enqueue(session, kind, data, model_id=model.id, at=now)


def _resolve(session: Session, model: Model, alarm: Alarm, *, now: datetime, by: str,
             resolution: dict[str, Any]) -> Alarm:
    alarm.state = RESOLVED
    alarm.open_key = None
    alarm.resolved_at = now
    alarm.resolved_by = by
    alarm.resolution = resolution
    session.flush()
    _announce(session, model, alarm, payloads.ALARM_RESOLVED, now)
    return alarm


def auto_resolve(session: Session, model: Model, alarm: Alarm, *, now: datetime,
                 resolution: dict[str, Any]) -> Alarm:
    """A window or feed alarm whose condition no longer holds."""
    return _resolve(session, model, alarm, now=now, by="system", resolution=resolution)


def resolve_by_person(session: Session, model_name: str, alarm_id: int, *, actor: str, note: str,
                      now: datetime) -> Alarm:
    """Resolve an open alarm (audited); a chart alarm restarts its chart at S = 0."""
    model = require(session, model_name)
    alarm = alarm_repo.alarm(session, model.id, alarm_id)
    if alarm is None:
        raise NotFound(f"model {model.name!r} has no alarm {alarm_id}")
    if alarm.state != OPEN:
        raise Conflict(f"alarm {alarm_id} is already resolved", [{"id": alarm_id, "state": alarm.state}])
    restarted = None
    rule = session.get(AlarmRule, alarm.rule_id)
    if rule is not None and rule.kind == Kind.CHART:
        params = ChartParams.model_validate(rule.params)
        n_charts = max(charts.count_streams(session, chart_rules(session, model)), 1)
        for stream in alarm_repo.streams_of(session, rule.id):
            if (stream.version, stream.segment_key, stream.segment_value) == (
                    alarm.version, alarm.segment_key, alarm.segment_value):
                charts.restart(stream, params, n_charts, now)
                restarted = {"control_limit": (stream.state or {}).get("h")}
    _resolve(session, model, alarm, now=now, by=actor,
             resolution={"reason": "resolved by a person", "note": note, "chart_restarted": restarted})
    audit.record(session, at=now, actor=actor, action="alarm.resolved", target=f"{model.name}/{alarm.id}",
                 detail={"rule": alarm.rule_name, "note": note, "chart_restarted": restarted},
                 model_id=model.id)
    session.flush()
    return alarm


def alarm_out(alarm: Alarm) -> dict[str, Any]:
    return {
        "id": alarm.id, "rule": alarm.rule_name, "state": alarm.state, **version_scope(alarm.version),
        "segment": _segment(alarm.segment_key, alarm.segment_value), "summary": alarm.summary,
        "crossed_at": alarm.crossed_at, "opened_at": alarm.opened_at, "resolved_at": alarm.resolved_at,
        "resolved_by": alarm.resolved_by, "resolution": alarm.resolution, "evidence": alarm.evidence,
    }


def list_alarms(session: Session, model_name: str, *, state: str | None, rule: str | None,
                version: str | None, tag: str | None, limit: int) -> list[dict[str, Any]]:
    model = require(session, model_name)
    if state is not None and state not in (OPEN, RESOLVED):
        raise invalid("state", "must be open or resolved")
    segment = None
    if tag is not None:
        key, sep, value = tag.partition(":")
        if not sep or not key or not value:
            raise invalid("tag", "must be key:value")
        segment = (key, value)
    if not 1 <= limit <= 1000:
        raise invalid("limit", "must be between 1 and 1000")
    rows = alarm_repo.list_alarms(session, model.id, state=state, rule=rule, version=version,
                                  segment=segment, limit=limit)
    return [alarm_out(a) for a in rows]
