"""``models.isolation.ModelGuard`` on its own: what it records, what it lets through, what it re-raises.

The backoff is the truncated binary exponential backoff (the usual retry schedule of
networks and queues): wait min(base · 2^(n-1), max) after the n-th consecutive failure.
The expected waits below are written out by hand from that formula.
"""

from __future__ import annotations

import logging
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa
from sqlalchemy.exc import OperationalError

from calibrant.clock import FixedClock
from calibrant.models.isolation import Backoff, ModelGuard
from calibrant.store.engine import make_session_factory
from calibrant.store.job_failure_tables import JobFailure
from calibrant.store.models_repo import get_or_create
from tests.conftest import Database

NOW = datetime(2026, 5, 1, 9, tzinfo=UTC)


def _model(db: Database, name: str) -> int:
    with make_session_factory(db.engine)() as session:
        model, _ = get_or_create(session, name, NOW)
        session.commit()
        return model.id


def _stored(db: Database) -> list[tuple]:
    with db.engine.connect() as conn:
        return conn.execute(sa.select(JobFailure.model_id, JobFailure.job, JobFailure.attempts,
                                      JobFailure.error_message)).all()


def test_waits_double_up_to_the_cap() -> None:
    backoff = Backoff(base_seconds=30, max_seconds=600, quarantine_after=9)
    waits = [backoff.delay(n).total_seconds() for n in range(1, 9)]
    assert waits == [30, 60, 120, 240, 480, 600, 600, 600]
    assert backoff.delay(10_000) == timedelta(seconds=600)  # no overflow far past the cap


def test_an_unavailable_database_is_not_a_model_failure(db: Database) -> None:
    model_id = _model(db, "sound")
    guard = ModelGuard(db.engine, FixedClock(NOW), "refresh")
    with pytest.raises(OperationalError), guard.unit(model_id):
        raise OperationalError("SELECT 1", {}, Exception("server closed the connection"))
    assert _stored(db) == []
    assert guard.allows(model_id)


class _Records(logging.Handler):
    """Kept on the module's own logger: the suite's log configuration may stop propagation above it."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.records: list[logging.LogRecord] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.records.append(record)


def test_a_failure_is_kept_per_model_and_job_and_a_success_clears_it(db: Database) -> None:
    broken, other = _model(db, "broken"), _model(db, "other")
    clock = FixedClock(NOW)
    guard = ModelGuard(db.engine, clock, "alarms", Backoff(base_seconds=60))
    with guard.unit(broken) as outcome:
        raise ValueError("a byte \x00 in the data")
    assert outcome.failed
    with guard.unit(other) as fine:
        pass
    assert not fine.failed
    assert _stored(db) == [(broken, "alarms", 1, "a byte \\x00 in the data")]  # NUL escaped for PostgreSQL
    assert guard.held_back() == {broken}
    assert ModelGuard(db.engine, clock, "refresh").held_back() == set()  # another job is not affected

    clock.advance(timedelta(seconds=60))
    later = ModelGuard(db.engine, clock, "alarms")
    assert later.allows(broken)  # its retry is due
    logger, seen = logging.getLogger("calibrant.jobs.isolation"), _Records()
    level = logger.level
    logger.setLevel(logging.INFO)
    logger.addHandler(seen)
    try:
        with later.unit(broken):
            pass
    finally:
        logger.removeHandler(seen)
        logger.setLevel(level)
    assert _stored(db) == []
    assert [(r.__dict__["event"], r.__dict__["model"]) for r in seen.records] == [("job.recovered", "broken")]
