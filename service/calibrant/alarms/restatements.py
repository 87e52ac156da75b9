"""Restatements: an alarm's data changed by outcomes reported after the alarm was raised.

The alarm's evidence is what the rule saw when it crossed and is never rewritten.
When a later outcome changes the period (its hours were summarised again after
the alarm's last look), the rule's kind judges the period again at the level it
was judged at, and if the statistic or the case count moved, the alarm gains an
entry: when, the new statistic, n and label completeness, and whether the
period would still cross. A chart alarm is restated by ``chart_restatements``: the
labels of the cases on its run that changed, and the statistic at the crossing again.
Alarms opened more than ``outcome_delay.MAX_DELAY_DAYS`` ago are left alone: outcomes
that late are outside the measured delay.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

from calibrant.alarms import chart_restatements, kinds, windows
from calibrant.alarms.kinds.base import ChartKind, WindowKind
from calibrant.clock import rfc3339
from calibrant.rollup import outcome_delay, query
from calibrant.rollup.periods import Period
from calibrant.store import alarm_repo
from calibrant.store.alarm_tables import Alarm, AlarmRule
from calibrant.store.tables import Model
from calibrant.store.unit import Session


def _instant(text: str) -> datetime:
    return datetime.fromisoformat(text)  # Python 3.11 reads the "Z" suffix itself


def restate(session: Session, model: Model, now: datetime) -> int:
    """Add a restatement to each recent alarm whose data changed; returns how many were added."""
    added = 0
    conn = session.connection()
    delay = outcome_delay.stored(model)
    since = now - timedelta(days=outcome_delay.MAX_DELAY_DAYS)
    for alarm in alarm_repo.alarms_opened_since(session, model.id, since):
        evidence = alarm.evidence or {}
        rule = session.get(AlarmRule, alarm.rule_id)
        if rule is None:
            continue
        kind = kinds.spec(rule.kind)
        if isinstance(kind, ChartKind):
            added += chart_restatements.restate(session, model, alarm, now)
            continue
        if "period_start" not in evidence or not isinstance(kind, WindowKind):
            continue
        history = list(alarm.restatements or [])
        last = history[-1] if history else evidence
        looked = _instant(history[-1]["checked_at"]) if history else alarm.opened_at
        period = Period(_instant(evidence["period_start"]), _instant(evidence["period_end"]))
        segment = (alarm.segment_key, alarm.segment_value)
        if not alarm_repo.summaries_recomputed_since(conn, model.id, alarm.version, segment,
                                                     period.start, period.end, looked):
            continue
        entry = _judge_again(session, model, rule, kind, alarm, period, delay, now)
        if entry["n"] != last.get("n") or entry["statistic"] != last.get("statistic"):
            alarm.restatements = [*history, entry]
            added += 1
        elif history:  # nothing moved: remember that we looked, so the next look starts here
            alarm.restatements = [*history[:-1], {**history[-1], "checked_at": rfc3339(now)}]
    session.flush()
    return added


def _judge_again(session: Session, model: Model, rule: AlarmRule, kind: WindowKind, alarm: Alarm,
                 period: Period, delay: outcome_delay.OutcomeDelay | None, now: datetime) -> dict[str, Any]:
    segment = (alarm.segment_key, alarm.segment_value)
    days = query.load_days(session.connection(), model, period.start, period.end, segment=segment,
                           version=alarm.version, boundary=query.maturity_boundary(model, now))
    inputs = windows.PeriodInputs(model, period, days, windows.references_of(session, model, now, segment))
    params: Any = kind.params.model_validate(rule.params)
    level = (alarm.evidence or {}).get("level")
    verdict = kind.decide(params, inputs, 0.0 if level is None else float(level))
    state = outcome_delay.period_state(model, delay, days, period.start, period.end, now)
    return {
        "at": rfc3339(now),
        "checked_at": rfc3339(now),
        "reason": "outcomes reported after the alarm changed its period",
        "statistic": verdict.statistic,
        "n": verdict.n,
        "label_completeness": state.label_completeness,
        "still_crosses": verdict.crossed,
    }
