"""The alarm job: for every model, advance its charts, judge newly ready periods, check its feeds.

One transaction per model, holding that model's ``alarm_model_state`` row
locked (``FOR UPDATE SKIP LOCKED`` on PostgreSQL), so two processes never
evaluate the same model at once; alarms and their outbox events commit
together with the chart states that produced them.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlalchemy import Engine
from sqlalchemy.orm import Session

from calibrant.alarms import charts, service, windows
from calibrant.alarms.rules import WINDOW_KINDS, Kind
from calibrant.store import alarm_repo
from calibrant.store.engine import make_session_factory
from calibrant.store.tables import Model


@dataclass
class EvaluationReport:
    models: int = 0
    cases: int = 0
    designs: int = 0
    periods: int = 0
    opened: int = 0
    resolved: int = 0

    def as_dict(self) -> dict[str, int]:
        return dict(self.__dict__)


def evaluate_model(session: Session, model: Model, now: datetime, report: EvaluationReport) -> None:
    """Everything the model's rules have to say at ``now`` (flushes; the caller commits)."""
    chart_rules = service.chart_rules(session, model)
    done = charts.run(session, model, chart_rules, now)
    report.cases += done.cases
    report.designs += done.designs
    for crossing in done.crossings:
        stream = crossing.stream
        segment = (stream.segment_key, stream.segment_value)
        opened = service.open_alarm(
            session, model, crossing.rule, version=stream.version, segment=segment,
            crossed_at=crossing.crossed_at, evidence=crossing.evidence, now=now,
            summary=f"{crossing.rule.name}: chart crossed h = {crossing.evidence['control_limit']:.3f} "
                    f"at case {crossing.case_id!r} (S = {crossing.evidence['statistic']:.3f})")
        report.opened += opened is not None
    for rule in alarm_repo.rules_of(session, model.id):
        if not rule.enabled:
            continue
        if Kind(rule.kind) in WINDOW_KINDS:
            w = windows.evaluate_rule(session, model, rule, now)
        elif rule.kind == Kind.STARVATION:
            w = windows.evaluate_starvation(session, model, rule, now)
        else:
            continue
        report.periods += w.periods
        report.opened += w.opened
        report.resolved += w.resolved


def evaluate_all(engine: Engine, now: datetime) -> EvaluationReport:
    report = EvaluationReport()
    sessions = make_session_factory(engine)
    with sessions() as session:
        model_ids = [m.id for m in alarm_repo.all_models(session)]
    for model_id in model_ids:
        with sessions() as session:
            model = session.get(Model, model_id)
            if model is None:
                continue
            service.ensure_defaults(session, model, now)
            session.commit()
            state = alarm_repo.model_state(session, model_id, lock=True)
            if state is None:  # another process is evaluating this model
                continue
            evaluate_model(session, model, now, report)
            state.evaluated_at = now
            session.commit()
            report.models += 1
    return report


def run(ctx: Any) -> dict[str, Any]:
    """``jobs.JOBS`` entry. The model count is left out: a round that only looked is idle."""
    done = evaluate_all(ctx.engine, ctx.clock.now()).as_dict()
    del done["models"]
    return done
