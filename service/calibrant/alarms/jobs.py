"""The alarm job: for every model, advance its charts, judge newly ready periods, check its feeds.

One transaction per model, holding that model's ``alarm_model_state`` row
locked (``FOR UPDATE SKIP LOCKED`` on PostgreSQL), so two processes never
evaluate the same model at once; alarms and their outbox events commit
together with the chart states that produced them.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from calibrant.alarms import budget, charts, feeds, kinds, restatements, service, windows
from calibrant.clock import Clock
from calibrant.models.isolation import ModelGuard
from calibrant.rollup import outcome_delay
from calibrant.store import alarm_repo
from calibrant.store.engine import make_session_factory
from calibrant.store.tables import Model
from calibrant.store.unit import Engine, Session, SessionFactory


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
    """Everything the model's rules have to say at ``now`` (flushes; the caller commits).

    The outcome delay is measured first (at most hourly): how long the rules wait for a case
    to be complete depends on it.
    """
    outcome_delay.refresh(session.connection(), model, now)
    done = charts.run(session, model, now)
    report.cases += done.cases
    report.designs += done.designs
    report.opened += done.opened
    split = budget.of_model(session, model)
    for rule in alarm_repo.rules_of(session, model.id):
        if not rule.enabled:
            continue
        evaluation = kinds.spec(rule.kind).evaluation
        if evaluation == "window":
            w = windows.evaluate_rule(session, model, rule, now, share=split.share_of(rule.name))
            report.periods += w.periods
            report.opened += w.opened
            report.resolved += w.resolved
        elif evaluation == "feed":
            f = feeds.evaluate_rule(session, model, rule, now, share=split.share_of(rule.name))
            report.opened += f.opened
            report.resolved += f.resolved
    restatements.restate(session, model, now)


JOB_NAME = "alarms"


def evaluate_all(engine: Engine, now: datetime, guard: ModelGuard | None = None) -> EvaluationReport:
    """Every model in turn; one that raises is recorded and held back by ``guard``, the rest go on."""
    report = EvaluationReport()
    sessions = make_session_factory(engine)
    with sessions() as session:
        model_ids = [m.id for m in alarm_repo.all_models(session)]
    for model_id in model_ids:
        if guard is None:
            _evaluate_one(sessions, model_id, now, report)
        elif guard.allows(model_id):
            with guard.unit(model_id):
                _evaluate_one(sessions, model_id, now, report)
    return report


def _evaluate_one(sessions: SessionFactory, model_id: int, now: datetime, report: EvaluationReport) -> None:
    """One transaction for the model; its figures count only once it commits (a raise rolls back all)."""
    own = EvaluationReport()
    with sessions() as session:
        model = session.get(Model, model_id)
        if model is None:
            return
        service.ensure_defaults(session, model, now)
        session.commit()
        state = alarm_repo.model_state(session, model_id, lock=True)
        if state is None:  # another process is evaluating this model
            return
        evaluate_model(session, model, now, own)
        state.evaluated_at = now
        session.commit()
    own.models = 1
    for name, value in own.as_dict().items():
        setattr(report, name, getattr(report, name) + value)


def run(engine: Engine, clock: Clock, guard: ModelGuard | None = None) -> dict[str, int]:
    """The ``alarms`` job of ``calibrant.jobs``. No model count: a round that only looked is idle."""
    guard = guard or ModelGuard(engine, clock, JOB_NAME)
    done = evaluate_all(engine, clock.now(), guard).as_dict()
    del done["models"]
    return done
