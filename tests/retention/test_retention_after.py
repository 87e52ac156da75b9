"""After the rows are gone: a refresh never empties a sealed hour, an as_of report of a removed
period is served from its stored snapshot, and delivered webhook rows and old audit events go
by the instance's settings."""

from __future__ import annotations

from datetime import timedelta

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.clock import FixedClock
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store import dirty
from calibrant.store.dirty import BucketKey
from calibrant.store.rollup_tables import BucketSummary
from calibrant.store.tables import AuditEvent, Model
from calibrant.store.webhook_tables import OutboxEvent, WebhookAttempt, WebhookDelivery, WebhookTarget
from tests.conftest import Database, make_client
from tests.retention.scenario import MODEL, NOW, load, run_jobs, set_retention

SEALED_HOUR = NOW.replace(year=2026, month=1, day=12, hour=10)
REPORT = {"start": "2026-01-12T00:00:00Z", "end": "2026-01-19T00:00:00Z", "as_of": "2026-03-01T00:00:00Z"}


def _payloads(db: Database, model_id: int) -> list[bytes]:
    with Session(db.engine) as session:
        return [bytes(p) for p in session.scalars(
            select(BucketSummary.payload).where(BucketSummary.model_id == model_id,
                                                BucketSummary.hour == SEALED_HOUR)
            .order_by(BucketSummary.segment_key, BucketSummary.segment_value))]


def test_a_refresh_clears_a_mark_on_a_sealed_hour_without_emptying_its_summaries(db: Database) -> None:
    clock = FixedClock(NOW)
    with make_client(db, clock=clock) as client:
        load(client)
        run_jobs(client)
        set_retention(client)
        run_jobs(client)
    with Session(db.engine) as session:
        model_id = session.scalars(select(Model.id).where(Model.name == MODEL)).one()
    kept = _payloads(db, model_id)
    # An outcome marks the hour of every version of its case; one may lie before the boundary.
    with db.engine.begin() as conn:
        dirty.mark(conn, [BucketKey(model_id, "default", SEALED_HOUR)], NOW)
    report = refresh_dirty(db.engine, clock, worker="test")
    assert report.sealed == 1
    assert report.buckets == 0
    assert kept
    assert _payloads(db, model_id) == kept
    assert db.scalar("SELECT count(*) FROM dirty_buckets") == 0


def test_an_as_of_report_of_a_removed_period_is_served_from_its_snapshot(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        load(client)
        run_jobs(client)
        generated = client.get(f"/v1/models/{MODEL}/report", params=REPORT)
        assert generated.status_code == 200, generated.text
        set_retention(client)
        run_jobs(client)
        served = client.get(f"/v1/models/{MODEL}/report", params=REPORT)
        never_generated = client.get(f"/v1/models/{MODEL}/report",
                                     params={**REPORT, "as_of": "2026-03-01T06:00:00Z"})
    assert served.status_code == 200, served.text
    first, again = generated.json(), served.json()
    assert again["content_hash"] == first["content_hash"]
    assert again["snapshot_id"] == first["snapshot_id"]
    assert again["periods"] == first["periods"]
    assert again["overall"] == first["overall"]
    assert "retention" in again["restatements"]["note"]
    assert never_generated.status_code == 409
    assert never_generated.json()["conflicts"] == [
        {"field": "start", "pruned_before": "2026-01-31T00:00:00Z"}]


def _webhook_rows(session: Session) -> None:
    """A target with three deliveries of old events: delivered, failed, and delivered recently."""
    old, recent = NOW - timedelta(days=20), NOW - timedelta(days=2)
    target = WebhookTarget(url="https://hooks.invalid/calibrant", description="", model_name=None,
                           event_types=["alarm.opened"], secret="s" * 32, consecutive_failures=0,
                           created_at=old, updated_at=old)
    session.add(target)
    session.flush()
    for n, (state, finished) in enumerate([("delivered", old), ("failed", old), ("delivered", recent)]):
        event = OutboxEvent(kind="alarm.opened", model_id=None, body="{}", created_at=old)
        session.add(event)
        session.flush()
        delivery = WebhookDelivery(message_id=f"msg_{n}", event_id=event.id, target_id=target.id, state=state,
                                   attempts=1, created_at=old, finished_at=finished)
        session.add(delivery)
        session.flush()
        session.add(WebhookAttempt(delivery_id=delivery.id, number=1, attempted_at=finished, status_code=200,
                                   latency_ms=5.0))
    session.add(AuditEvent(at=NOW - timedelta(days=400), actor="cli", action="key.created", target="k1",
                           detail={}))
    session.commit()


def test_delivered_webhook_rows_and_audit_events_go_by_the_instance_settings(db: Database) -> None:
    with Session(db.engine) as session:
        _webhook_rows(session)
    with make_client(db, clock=FixedClock(NOW), webhook_retention_days=7, audit_retention_days=365,
                     webhook_sender="log") as client:
        done = run_jobs(client)["jobs"]["retention"]
        trail = client.get("/v1/audit", params={"action": "retention.pruned"}).json()["events"]
    assert (done["deliveries"], done["events"], done["audit_events"]) == (1, 1, 1)
    assert db.scalar("SELECT count(*) FROM webhook_deliveries") == 2  # the failed and the recent one
    assert db.scalar("SELECT count(*) FROM webhook_attempts") == 2
    assert db.scalar("SELECT count(*) FROM outbox_events") == 2
    assert db.scalar("SELECT count(*) FROM audit_events WHERE action = 'key.created'") == 0
    assert sorted((e["target"], e["actor"]) for e in trail) == [
        ("audit events", "(retention job)"), ("webhook deliveries", "(retention job)")]
