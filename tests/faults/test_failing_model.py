"""A model whose work raises is held back; every other model is refreshed, charted and delivered.

The fault is injected in the summarising step of the refresh for one model only: the
model "broken" declares the segment key ``lane`` and "sound" declares none, and the
wrapped ``summarise_rows`` of the set-based refresh raises when it is handed the book of a
model keyed by ``lane``. The jobs then run as the scheduler runs them (``jobs.run_all``), under a
FixedClock, so every backoff step is reached exactly, without sleeping.

Expected backoff (``models.isolation.Backoff``, the usual doubling schedule): after the
n-th failed attempt the job waits min(base · 2^(n-1), max). With base 60 s, max 300 s and
quarantine after 5 attempts the waits are 60, 120, 240, 300 s, then quarantine.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from calibrant import jobs
from calibrant.alarms import jobs as alarm_jobs
from calibrant.clock import FixedClock
from calibrant.logs import JsonFormatter
from calibrant.models.isolation import Backoff, ModelGuard
from calibrant.notify import jobs as notify_jobs
from calibrant.notify.senders import RecordingSender
from calibrant.rollup import bulk_refresh
from calibrant.rollup import refresh as refresh_module
from calibrant.store import keys_repo, summary_writes
from calibrant.store.alarm_tables import AlarmModelState
from calibrant.store.dirty import DayKey
from calibrant.store.engine import make_session_factory
from calibrant.store.keys_repo import Scope
from calibrant.store.rollup_tables import BucketSummary, DaySummary, DirtyBucket, DirtyDay
from calibrant.store.tables import AuditEvent, Model
from calibrant.store.webhook_tables import WebhookDelivery
from tests.conftest import Database, make_client
from tests.notify.helpers import add_events, add_target

START = datetime(2026, 3, 4, 12, tzinfo=UTC)
SCORED = datetime(2026, 3, 2, 8, tzinfo=UTC)
BACKOFF = {"job_retry_base_seconds": 60.0, "job_retry_max_seconds": 300.0, "job_quarantine_after": 5}
WAITS_S = [60, 120, 240, 300]  # min(60 · 2^(n-1), 300) for n = 1..4; the 5th failure quarantines


class Captured(logging.Handler):
    """The isolation module's log records, formatted as the JSON log lines a server writes."""

    def __init__(self) -> None:
        super().__init__()
        self.lines: list[dict] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.lines.append(json.loads(JsonFormatter().format(record)))


@pytest.fixture
def captured() -> Iterator[Captured]:
    handler = Captured()
    logger = logging.getLogger("calibrant.jobs.isolation")
    logger.addHandler(handler)
    old_level = logger.level
    logger.setLevel(logging.INFO)
    yield handler
    logger.removeHandler(handler)
    logger.setLevel(old_level)


def _post_cases(client: TestClient, model: str, n: int = 12) -> None:
    predictions = [{"id": f"{model}-{i}", "probability": 0.1 + 0.05 * i,
                    "scored_at": (SCORED + timedelta(minutes=9 * i)).isoformat(), "tags": {"lane": "a"}}
                   for i in range(n)]
    r = client.post(f"/v1/models/{model}/predictions", json={"predictions": predictions})
    assert r.status_code == 200, r.text
    outcomes = [{"id": f"{model}-{i}", "label": i % 2,
                 "observed_at": (SCORED + timedelta(hours=6)).isoformat()} for i in range(n)]
    assert client.post(f"/v1/models/{model}/outcomes", json={"outcomes": outcomes}).status_code == 200


@contextmanager
def _two_models(db: Database, clock: FixedClock) -> Iterator[TestClient]:
    """A client on ``db`` and the models "sound" (no segment key) and "broken" (keyed by lane)."""
    with make_client(db, clock=clock, **BACKOFF) as client:
        _put_and_post(client)
        yield client


def _put_and_post(client: TestClient) -> None:
    assert client.put("/v1/models/sound", json={"segment_keys": []}).status_code == 201
    assert client.put("/v1/models/broken", json={"segment_keys": ["lane"]}).status_code == 201
    _post_cases(client, "sound")
    _post_cases(client, "broken")


def _model_id(db: Database, name: str) -> int:
    return int(db.scalar("SELECT id FROM models WHERE name = :n", n=name))


def _count(db: Database, table: type, model_id: int) -> int:
    with db.engine.connect() as conn:
        return int(conn.execute(sa.select(sa.func.count()).select_from(table)
                                .where(table.model_id == model_id)).scalar_one())


def _context(db: Database, clock: FixedClock, sender: RecordingSender) -> jobs.JobContext:
    return jobs.JobContext(engine=db.engine, clock=clock, settings=db.settings(**BACKOFF),
                           webhook_sender=sender)


def _evaluated_at(conn: sa.Connection) -> dict[int, datetime | None]:
    """When the alarms job last evaluated each model (its charts and rules)."""
    return dict(conn.execute(sa.select(AlarmModelState.model_id, AlarmModelState.evaluated_at)).all())


def _sent(sender: RecordingSender) -> list[tuple[str, str]]:
    """(model, rule) of each alarm event the receiver got."""
    events = [json.loads(r.body)["data"] for r in sender.requests]
    return [(e["model"], e["alarm"]["rule"]) for e in events]


def _failures(client: TestClient) -> list[dict]:
    health = client.get("/healthz")
    assert health.status_code == 200  # degraded is still 200: the service answers for every model
    return health.json()["job_failures"]


def test_a_raising_bucket_holds_back_only_its_model_with_backoff_quarantine_and_resume(
    db: Database, monkeypatch: pytest.MonkeyPatch, captured: Captured
) -> None:
    clock = FixedClock(START)
    with _two_models(db, clock) as client:
        _isolate_backoff_quarantine_resume(db, clock, client, monkeypatch, captured)


def _isolate_backoff_quarantine_resume(db: Database, clock: FixedClock, client: TestClient,
                                       monkeypatch: pytest.MonkeyPatch, captured: Captured) -> None:
    sound, broken = _model_id(db, "sound"), _model_id(db, "broken")
    sessions = make_session_factory(db.engine)
    add_target(sessions, "http://127.0.0.1:9/hook", START)
    add_events(sessions, "sound", 2, START)
    add_events(sessions, "broken", 1, START)

    calls = {"broken": 0}
    real_summarise = bulk_refresh.summarise_rows

    def summarise(rows, claims, book, decoder):
        if book.keys == ["lane"]:
            calls["broken"] += 1
            raise RuntimeError("injected fault in a bucket of the lane-keyed model")
        return real_summarise(rows, claims, book, decoder)

    monkeypatch.setattr(bulk_refresh, "summarise_rows", summarise)
    sender = RecordingSender()
    ctx = _context(db, clock, sender)

    report = jobs.run_all(ctx)  # raised before isolation: the whole round stopped

    # The sound model was refreshed, charted and delivered; the broken one's buckets wait unclaimed.
    assert _count(db, BucketSummary, sound) > 0
    assert _count(db, BucketSummary, broken) == 0
    assert _count(db, DirtyBucket, sound) == 0
    with db.engine.connect() as conn:
        marks = conn.execute(sa.select(DirtyBucket.claimed_by).where(DirtyBucket.model_id == broken)).all()
        evaluated = _evaluated_at(conn)
    assert len(marks) == 2
    assert all(claimed_by is None for (claimed_by,) in marks)  # released for the retry
    assert evaluated[sound] == START
    # Two queued events each, and the feed-starvation alarm the alarms job opened for each model (its
    # last prediction is 52 h old); delivery is a job of its own, so broken's are sent too.
    assert sorted(_sent(sender)) == [("broken", "excess-log-loss"), ("broken", "feed-starvation"),
                                     ("sound", "excess-log-loss"), ("sound", "excess-log-loss"),
                                     ("sound", "feed-starvation")]
    assert report["jobs"]["refresh"]["buckets"] == 2  # sound's two hours
    assert calls["broken"] == 1  # each model's claimed buckets are one unit: one call, one failure

    # Recorded, shown as degraded, logged as one JSON line naming model and job.
    (failure,) = _failures(client)
    assert failure | {"first_seen_at": None, "last_seen_at": None, "retry_at": None} == {
        "model": "broken", "job": "refresh", "error_class": "RuntimeError",
        "error_message": "injected fault in a bucket of the lane-keyed model", "attempts": 1,
        "first_seen_at": None, "last_seen_at": None, "retry_at": None, "quarantined": False,
        "quarantined_at": None,
    }
    assert failure["retry_at"] == "2026-03-04T12:01:00Z"
    health = client.get("/healthz").json()
    assert (health["status"], health["failed"], health["database"]) == ("degraded", ["jobs"], "ok")
    (line,) = [x for x in captured.lines if x.get("event") == "job.failed"]
    assert (line["model"], line["job"], line["attempts"], line["level"]) == ("broken", "refresh", 1, "error")
    assert "RuntimeError: injected fault" in line["exception"]

    # Backoff: nothing before each retry is due, one attempt when it is; the fifth quarantines.
    for attempt, wait in enumerate(WAITS_S, start=2):
        before = calls["broken"]
        clock.advance(timedelta(seconds=wait - 1))
        jobs.run_all(ctx)
        assert calls["broken"] == before, f"retried before {wait} s had passed"
        clock.advance(timedelta(seconds=1))
        jobs.run_all(ctx)
        assert calls["broken"] == before + 1  # one call per attempt
        (failure,) = _failures(client)
        assert failure["attempts"] == attempt
    assert failure["quarantined"] is True
    assert failure["retry_at"] is None
    assert failure["first_seen_at"] == "2026-03-04T12:00:00Z"
    quarantined_at = START + timedelta(seconds=sum(WAITS_S))
    assert failure["quarantined_at"] == quarantined_at.isoformat().replace("+00:00", "Z")
    before = calls["broken"]
    clock.advance(timedelta(days=2))
    jobs.run_all(ctx)
    assert calls["broken"] == before  # quarantined: skipped however long it waits
    assert [x["event"] for x in captured.lines].count("job.quarantined") == 1

    model = client.get("/v1/models/broken").json()
    assert [(f["job"], f["quarantined"]) for f in model["job_failures"]] == [("refresh", True)]
    assert client.get("/v1/models/sound").json()["job_failures"] == []
    scraped = client.get("/metrics").text
    assert 'calibrant_job_quarantined{job="refresh",model="broken"} 1.0' in scraped
    assert 'calibrant_job_failed_attempts{job="refresh",model="broken"} 5.0' in scraped

    # An admin resumes it (audited); with the fault gone the next run refreshes it.
    monkeypatch.setattr(bulk_refresh, "summarise_rows", real_summarise)
    assert client.post("/v1/models/nowhere/resume").status_code == 404
    resumed = client.post("/v1/models/broken/resume")
    assert resumed.status_code == 200, resumed.text
    assert [(c["job"], c["attempts"]) for c in resumed.json()["cleared"]] == [("refresh", 5)]
    with make_session_factory(db.engine)() as session:
        (event,) = session.scalars(sa.select(AuditEvent).where(AuditEvent.action == "model.resumed")).all()
        assert (event.target, event.actor, event.model_id) == ("broken", "local", broken)
        assert event.detail["cleared"][0]["job"] == "refresh"
    assert client.get("/healthz").json()["status"] == "ok"
    jobs.run_all(ctx)
    assert _count(db, BucketSummary, broken) > 0
    assert _count(db, DirtyBucket, broken) == 0
    assert _failures(client) == []


def test_alarm_and_delivery_failures_are_held_per_model_and_per_job(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = FixedClock(START)
    with _two_models(db, clock) as client:
        _alarms_and_deliveries(db, clock, client, monkeypatch)


def _alarms_and_deliveries(db: Database, clock: FixedClock, client: TestClient,
                           monkeypatch: pytest.MonkeyPatch) -> None:
    sound, broken = _model_id(db, "sound"), _model_id(db, "broken")
    sessions = make_session_factory(db.engine)
    add_target(sessions, "http://127.0.0.1:9/hook", START)
    add_events(sessions, "sound", 2, START)
    broken_deliveries = add_events(sessions, "broken", 3, START)

    real_evaluate, real_attempt = alarm_jobs.evaluate_model, notify_jobs._attempt

    def evaluate(session, model: Model, now, report):
        if model.name == "broken":
            raise ValueError("injected fault in the broken model's rules")
        real_evaluate(session, model, now, report)

    def attempt(run, delivery):
        if delivery.model_id == broken:
            raise KeyError("injected fault in the broken model's delivery")
        real_attempt(run, delivery)

    monkeypatch.setattr(alarm_jobs, "evaluate_model", evaluate)
    monkeypatch.setattr(notify_jobs, "_attempt", attempt)
    sender = RecordingSender()
    jobs.run_all(_context(db, clock, sender))

    # sound's two queued events and the starvation alarm its evaluation opened; nothing of broken
    assert sorted(_sent(sender)) == [("sound", "excess-log-loss"), ("sound", "excess-log-loss"),
                                     ("sound", "feed-starvation")]
    with db.engine.connect() as conn:
        evaluated = _evaluated_at(conn)
        held = conn.execute(sa.select(WebhookDelivery.state, WebhookDelivery.attempts)
                            .where(WebhookDelivery.id.in_(broken_deliveries))).all()
    assert evaluated[sound] == START
    assert evaluated.get(broken) is None
    # The first of broken's deliveries raised; the model is then held back, so none was attempted.
    assert held == [("pending", 0)] * 3
    failures = {(f["model"], f["job"]): f for f in _failures(client)}
    assert sorted(failures) == [("broken", "alarms"), ("broken", "deliver_webhooks")]
    assert failures[("broken", "alarms")]["error_class"] == "ValueError"
    assert failures[("broken", "deliver_webhooks")]["error_class"] == "KeyError"

    # The resume needs the admin scope, like every other admin route.
    with sessions() as session:
        reader = keys_repo.create(session, Scope.READ, START).token
        session.commit()
    with make_client(db, clock=clock, auth="required", **BACKOFF) as guarded:
        assert guarded.post("/v1/models/broken/resume").status_code == 401
        headers = {"authorization": f"Bearer {reader}"}
        assert guarded.post("/v1/models/broken/resume", headers=headers).status_code == 403


def test_a_day_that_cannot_be_merged_holds_back_only_its_model(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = FixedClock(START)
    with _two_models(db, clock) as client:
        sound, broken = _model_id(db, "sound"), _model_id(db, "broken")
        real_hours_of_days = summary_writes.hours_of_days

        def hours_of_days(conn: sa.Connection, keys: list[DayKey]) -> list:
            if any(key.model_id == broken for key in keys):
                raise ZeroDivisionError("injected fault in a day of the broken model")
            return real_hours_of_days(conn, keys)

        monkeypatch.setattr(summary_writes, "hours_of_days", hours_of_days)
        guard = ModelGuard(db.engine, clock, refresh_module.JOB_NAME, Backoff(60, 300, 5))
        report = refresh_module.refresh_dirty(db.engine, clock, worker="test", guard=guard)

        assert sorted(key.model_id for key, _ in report.recomputed) == [sound, sound, broken, broken]
        assert [key.model_id for key, _ in report.merged_days] == [sound]
        assert _count(db, DaySummary, sound) > 0
        assert _count(db, DaySummary, broken) == 0
        with db.engine.connect() as conn:
            days = conn.execute(sa.select(DirtyDay.claimed_by).where(DirtyDay.model_id == broken)).all()
        assert days == [(None,)]  # still dirty, and given back for the retry
        assert [(f["model"], f["job"], f["error_class"]) for f in _failures(client)] == [
            ("broken", "refresh", "ZeroDivisionError")]
