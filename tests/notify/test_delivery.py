"""Delivery through the outbox against a real receiver on 127.0.0.1, on both dialects.

Time is a FixedClock: the tests jump it past each backoff instead of sleeping.
"""

from __future__ import annotations

import random
from datetime import timedelta

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.clock import FixedClock
from calibrant.notify import HttpSender, deliver_due
from calibrant.store import outbox_repo
from calibrant.store.webhook_tables import WebhookDelivery
from tests.conftest import Database
from tests.notify.conftest import START
from tests.notify.helpers import add_events, add_target, loopback_resolver, sessions_for
from tests.notify.receiver import Receiver, Reply, verify_standard_webhook


def _sender() -> HttpSender:
    return HttpSender(allow_private=True, resolver=loopback_resolver)


def _delivery_rows(db: Database) -> list[dict]:
    # Through the mapped types, so SQLite's naive datetimes come back as UTC instants.
    with Session(db.engine) as session:
        rows = session.scalars(select(WebhookDelivery).order_by(WebhookDelivery.id))
        return [
            {"message_id": r.message_id, "state": r.state, "attempts": r.attempts,
             "next_attempt_at": r.next_attempt_at}
            for r in rows
        ]


def test_signed_event_reaches_receiver_and_verifies_independently(db: Database, receiver: Receiver) -> None:
    settings = db.settings(webhook_allow_private=True)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    _target, secret = add_target(sessions, receiver.url, START)
    add_events(sessions, "churn", 1, START)

    stats = deliver_due(sessions, clock, settings, _sender())

    assert stats.delivered == 1
    (got,) = receiver.received
    assert verify_standard_webhook(secret, got.headers, got.body)
    assert got.headers["webhook-timestamp"] == str(int(START.timestamp()))
    assert got.headers["webhook-id"] == _delivery_rows(db)[0]["message_id"]
    event = got.json
    assert event["type"] == "alarm.opened"
    assert event["timestamp"] == "2026-12-01T09:00:00Z"
    assert event["data"]["model"] == "churn"
    assert event["data"]["segment"] == {"key": "region", "value": "north"}
    assert event["data"]["evidence"]["n"] == 1200
    # A tampered body must not verify: the check above is not vacuous.
    assert not verify_standard_webhook(secret, got.headers, got.body + b" ")
    assert _delivery_rows(db)[0]["state"] == "delivered"
    engine.dispose()


def test_outage_and_restart_deliver_each_event_once_with_its_id(db: Database, receiver: Receiver) -> None:
    settings = db.settings(webhook_allow_private=True)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    _target, secret = add_target(sessions, receiver.url, START)
    add_events(sessions, "churn", 3, START)
    receiver.stop()  # the receiver goes down: connections are refused

    first = deliver_due(sessions, clock, settings, _sender())
    clock.advance(timedelta(minutes=2))
    second = deliver_due(sessions, clock, settings, _sender())
    assert (first.retrying, second.retrying) == (3, 3)
    rows = _delivery_rows(db)
    assert len(rows) == 3  # one delivery per event
    assert all(r["state"] == "pending" and r["attempts"] == 2 for r in rows)
    engine.dispose()  # the service stops; only the database remembers

    receiver.start()  # back on the same port
    engine, sessions = sessions_for(settings)  # a new process: new engine, sessions, sender
    assert deliver_due(sessions, clock, settings, _sender()).attempted == 0  # nothing due yet
    clock.advance(timedelta(minutes=10))
    third = deliver_due(sessions, clock, settings, _sender())
    clock.advance(timedelta(days=2))
    fourth = deliver_due(sessions, clock, settings, _sender())

    assert (third.delivered, fourth.attempted) == (3, 0)
    expected_ids = sorted(r["message_id"] for r in _delivery_rows(db))
    assert sorted(receiver.ids()) == expected_ids  # every event once, with the id it always had
    assert all(verify_standard_webhook(secret, r.headers, r.body) for r in receiver.received)
    assert len({r.json["data"]["alarm"]["id"] for r in receiver.received}) == 3
    engine.dispose()


def test_server_error_is_retried_with_same_id_and_new_timestamp(db: Database, receiver: Receiver) -> None:
    settings = db.settings(webhook_allow_private=True)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    _target, secret = add_target(sessions, receiver.url, START)
    add_events(sessions, "churn", 1, START)
    receiver.script = [Reply(500), Reply(502)]

    deliver_due(sessions, clock, settings, _sender())
    for _ in range(2):
        clock.set(_delivery_rows(db)[0]["next_attempt_at"])
        deliver_due(sessions, clock, settings, _sender())

    first, second, third = receiver.received
    assert first.headers["webhook-id"] == second.headers["webhook-id"] == third.headers["webhook-id"]
    assert first.body == second.body == third.body
    assert first.headers["webhook-timestamp"] < second.headers["webhook-timestamp"]
    assert all(verify_standard_webhook(secret, r.headers, r.body) for r in receiver.received)
    (row,) = _delivery_rows(db)
    assert (row["state"], row["attempts"]) == ("delivered", 3)
    with sessions() as session:
        (record,) = outbox_repo.deliveries_of(session, _target, 10)
    assert [a.status_code for a in record.attempts] == [500, 502, 200]
    assert record.attempts[0].next_attempt_at is not None
    assert record.attempts[2].next_attempt_at is None
    engine.dispose()


def test_timeout_is_retried(db: Database, receiver: Receiver) -> None:
    # A real slow receiver: the client must give up after its timeout and try again later.
    settings = db.settings(webhook_allow_private=True, webhook_timeout_seconds=0.3)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    target_id, _ = add_target(sessions, receiver.url, START)
    add_events(sessions, "churn", 1, START)
    receiver.script = [Reply(200, delay_seconds=1.5)]

    stats = deliver_due(sessions, clock, settings, _sender())
    assert stats.retrying == 1
    with sessions() as session:
        (record,) = outbox_repo.deliveries_of(session, target_id, 10)
    assert record.attempts[0].status_code is None
    assert "timeout" in (record.attempts[0].error or "")
    clock.set(record.delivery.next_attempt_at)
    assert deliver_due(sessions, clock, settings, _sender()).delivered == 1
    assert len(set(receiver.ids())) == 1
    assert len(receiver.ids()) == 2
    engine.dispose()


def test_retry_after_is_a_floor_for_the_next_attempt(db: Database, receiver: Receiver) -> None:
    settings = db.settings(webhook_allow_private=True)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    add_target(sessions, receiver.url, START)
    add_events(sessions, "churn", 1, START)
    receiver.script = [Reply(503, headers={"Retry-After": "3600"})]

    deliver_due(sessions, clock, settings, _sender())
    assert _delivery_rows(db)[0]["next_attempt_at"] == START + timedelta(seconds=3600)
    clock.advance(timedelta(seconds=3599))
    assert deliver_due(sessions, clock, settings, _sender()).attempted == 0
    clock.advance(timedelta(seconds=1))
    assert deliver_due(sessions, clock, settings, _sender()).delivered == 1
    assert len(receiver.received) == 2
    engine.dispose()


def test_retry_after_beyond_the_window_ends_the_delivery(db: Database, receiver: Receiver) -> None:
    settings = db.settings(webhook_allow_private=True, webhook_retry_window_hours=1)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    add_target(sessions, receiver.url, START)
    add_events(sessions, "churn", 1, START)
    receiver.script = [Reply(429, headers={"Retry-After": str(2 * 3600)})]

    stats = deliver_due(sessions, clock, settings, _sender())
    assert stats.failed == 1
    assert _delivery_rows(db)[0]["state"] == "failed"
    engine.dispose()


def test_hostname_resolving_to_refused_address_is_not_called(db: Database, receiver: Receiver) -> None:
    # Registered while the name pointed at an allowed address; at send time it points at the
    # metadata service, so nothing may be sent — even with private targets allowed.
    settings = db.settings(webhook_allow_private=True)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    target_id, _ = add_target(sessions, f"http://hooks.example.test:{receiver.port}/hook", START)
    add_events(sessions, "churn", 1, START)

    def rebound(_host: str, _port: int) -> list[str]:
        return ["169.254.169.254"]

    stats = deliver_due(sessions, clock, settings, HttpSender(allow_private=True, resolver=rebound))
    assert (stats.attempted, stats.retrying) == (1, 1)
    assert receiver.received == []
    with sessions() as session:
        (record,) = outbox_repo.deliveries_of(session, target_id, 10)
    assert record.attempts[0].error.startswith("refused: hooks.example.test resolves to a refused address")

    # Once the name resolves to the receiver again, the same delivery goes through, to the
    # address that was checked, with the original Host header.
    clock.set(record.delivery.next_attempt_at)
    assert deliver_due(sessions, clock, settings, _sender()).delivered == 1
    assert receiver.received[0].headers["host"] == f"hooks.example.test:{receiver.port}"
    engine.dispose()


def test_private_receiver_refused_at_send_time_without_the_setting(db: Database, receiver: Receiver) -> None:
    settings = db.settings(webhook_allow_private=False)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    add_target(sessions, receiver.url, START)  # registered while the setting was on
    add_events(sessions, "churn", 1, START)
    sender = HttpSender(allow_private=False, resolver=loopback_resolver)
    assert deliver_due(sessions, clock, settings, sender).retrying == 1
    assert receiver.received == []
    engine.dispose()


def test_rng_spreads_first_retries(db: Database) -> None:
    # Jitter: deliveries that failed together do not all come back at the same instant.
    from calibrant.notify.senders import RecordingSender, response_result

    settings = db.settings()
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    add_target(sessions, "http://127.0.0.1:9/x", START)
    add_events(sessions, "churn", 5, START)
    sender = RecordingSender(respond=lambda _r: response_result(500, 1.0))
    deliver_due(sessions, clock, settings, sender, rng=random.Random(7))
    delays = [(r["next_attempt_at"] - START).total_seconds() for r in _delivery_rows(db)]
    assert len(set(delays)) == 5
    assert all(15 <= d <= 30 for d in delays)
    engine.dispose()
