"""One model that breaks a background job never stops the job for the other models.

A job runs each model's unit of work inside ``ModelGuard.unit(model_id)``. An exception
there is recorded for (model, job) in ``job_failures``, logged, and swallowed, so the job
goes on with the next model; only "the database is unavailable" (``store.unit.is_unavailable``)
propagates, because it concerns every model alike and the job as a whole retries later.

The failed model is tried again after an exponential backoff: after the n-th consecutive
failed attempt the job waits ``min(base · 2^(n-1), max)`` (``Backoff.delay``; the usual
doubling retry schedule). When n reaches ``quarantine_after`` the model is quarantined:
the job skips it until an admin resumes it (``resume``, audited). A unit that succeeds
deletes the record: the model has recovered by itself.

The guard reads the job's failure records once, when it is made, so a model with no
failure costs nothing beyond that one query per job run.
"""

from __future__ import annotations

import logging
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timedelta

from calibrant.clock import Clock, rfc3339
from calibrant.config import Settings
from calibrant.store import audit, job_failures_repo
from calibrant.store.job_failures_repo import FailureRecord
from calibrant.store.tables import Model
from calibrant.store.unit import Engine, Session, is_unavailable

log = logging.getLogger("calibrant.jobs.isolation")

MESSAGE_CHARS = 2000  # of an error's text kept in the record; the log line has the traceback


@dataclass(frozen=True, slots=True)
class Backoff:
    """When a failing model is tried again, and after how many failed attempts it is quarantined."""

    base_seconds: float = 60.0
    max_seconds: float = 3600.0
    quarantine_after: int = 6

    @classmethod
    def from_settings(cls, settings: Settings) -> Backoff:
        return cls(settings.job_retry_base_seconds, settings.job_retry_max_seconds,
                   settings.job_quarantine_after)

    def delay(self, attempts: int) -> timedelta:
        """Wait after the ``attempts``-th consecutive failure: min(base · 2^(attempts-1), max)."""
        exponent = min(max(attempts - 1, 0), 60)  # 2^60 s is past any max: no overflow, same answer
        return timedelta(seconds=min(self.base_seconds * 2.0 ** exponent, self.max_seconds))


@dataclass(slots=True)
class UnitOutcome:
    """What a guarded unit came to; ``failed`` is set when it raised and was recorded."""

    failed: bool = False


class ModelGuard:
    """Per-model isolation for one run of one job (see the module docstring)."""

    def __init__(self, engine: Engine, clock: Clock, job: str, backoff: Backoff | None = None) -> None:
        self.engine = engine
        self.clock = clock
        self.job = job
        self.backoff = backoff or Backoff()
        with engine.begin() as conn:
            self._records: dict[int, FailureRecord] = job_failures_repo.of_job(conn, job)

    def held_back(self) -> set[int]:
        """Models the job skips now: quarantined, or failed and waiting for their retry."""
        now = self.clock.now()
        return {m for m, record in self._records.items() if record.held_back_at(now)}

    def allows(self, model_id: int) -> bool:
        record = self._records.get(model_id)
        return record is None or not record.held_back_at(self.clock.now())

    @contextmanager
    def unit(self, model_id: int) -> Iterator[UnitOutcome]:
        """Run one model's work: a failure is recorded and swallowed, a success clears the record."""
        outcome = UnitOutcome()
        try:
            yield outcome
        except Exception as exc:
            if is_unavailable(exc):
                raise
            outcome.failed = True
            self.failed(model_id, exc)
        else:
            self.succeeded(model_id)

    def succeeded(self, *model_ids: int) -> None:
        """These models went through: a failure recorded earlier is over."""
        recovered = [self._records.pop(m) for m in model_ids if m in self._records]
        if not recovered:
            return
        with self.engine.begin() as conn:
            for record in recovered:
                job_failures_repo.forget(conn, record.model_id, self.job)
        for record in recovered:
            log.info("job %s recovered on model=%s after %d failed attempts", self.job, record.model,
                     record.attempts, extra={"event": "job.recovered", "job": self.job,
                                             "model": record.model, "attempts": record.attempts})

    def failed(self, model_id: int, exc: BaseException) -> FailureRecord:
        """Record the failure, with the next retry or the quarantine, and log it."""
        now = self.clock.now()
        before = self._records.get(model_id)
        attempts = 1 if before is None else before.attempts + 1
        quarantined = attempts >= self.backoff.quarantine_after
        with self.engine.begin() as conn:
            job_failures_repo.save(
                conn, model_id, self.job,
                error_class=type(exc).__name__, error_message=_printable(str(exc))[:MESSAGE_CHARS],
                attempts=attempts, first_seen_at=now if before is None else before.first_seen_at,
                now=now, retry_at=now + self.backoff.delay(attempts),
                quarantined_at=(before.quarantined_at if before and before.quarantined_at else now)
                if quarantined else None,
            )
            record = next(r for r in job_failures_repo.of_model(conn, model_id) if r.job == self.job)
        self._records[model_id] = record
        _log_failure(record, exc)
        return record


def _printable(text: str) -> str:
    """PostgreSQL text cannot hold NUL, and an error about bad data may quote some."""
    return text.replace("\x00", "\\x00")


def _log_failure(record: FailureRecord, exc: BaseException) -> None:
    after = ("quarantined until an admin resumes it" if record.quarantined
             else f"retry at {rfc3339(record.retry_at)}")
    log.error(
        "job %s failed on model=%s (%s: %s), attempt %d, %s; the other models go on",
        record.job, record.model, record.error_class, record.error_message, record.attempts, after,
        exc_info=(type(exc), exc, exc.__traceback__),
        extra={"event": "job.quarantined" if record.quarantined else "job.failed", "job": record.job,
               "model": record.model, "error_class": record.error_class, "attempts": record.attempts,
               "retry_at": None if record.quarantined else rfc3339(record.retry_at),
               "quarantined": record.quarantined},
    )


def failures(session: Session, model_id: int | None = None) -> list[FailureRecord]:
    """Every job failure (of one model, if given), by model name then job."""
    conn = session.connection()
    if model_id is None:
        return job_failures_repo.everything(conn)
    return job_failures_repo.of_model(conn, model_id)


def resume(session: Session, model: Model, *, actor: str, now: datetime) -> list[FailureRecord]:
    """An admin clears the model's failures (quarantined or waiting): every job takes it at its next run.

    Audited (``model.resumed``, with what was cleared) even when nothing was held back, since
    the admin asked. The caller commits.
    """
    cleared = job_failures_repo.forget_model(session.connection(), model.id)
    audit.record(
        session, at=now, actor=actor, action="model.resumed", target=model.name, model_id=model.id,
        detail={"cleared": [{"job": r.job, "attempts": r.attempts, "quarantined": r.quarantined,
                             "error_class": r.error_class} for r in cleared]},
    )
    log.info("model=%s resumed by %s (%d job failures cleared)", model.name, actor, len(cleared),
             extra={"event": "model.resumed", "model": model.name, "actor": actor,
                    "jobs": [r.job for r in cleared]})
    return cleared
