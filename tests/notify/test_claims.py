"""Claims across workers: giving up at the end of the window, lapsed claims, concurrent runs."""

from __future__ import annotations

import itertools
import threading
from datetime import timedelta

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.clock import FixedClock
from calibrant.notify import HttpSender, deliver_due
from calibrant.notify.senders import RecordingSender, response_result
from calibrant.store import outbox_repo
from calibrant.store.webhook_tables import WebhookDelivery, WebhookTarget
from tests.conftest import Database, make_client
from tests.notify.conftest import START
from tests.notify.helpers import add_events, add_target, loopback_resolver, sessions_for
from tests.notify.receiver import Receiver


def _failing(_request: object) -> object:
    return response_result(500, 1.0)


def test_gives_up_after_the_window_and_marks_the_target_failing(db: Database) -> None:
    settings = db.settings(webhook_failing_after=5)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    target_id, _ = add_target(sessions, "http://127.0.0.1:9/hook", START)
    (delivery_id,) = add_events(sessions, "churn", 1, START)
    sender = RecordingSender(respond=_failing)

    for _ in range(200):  # bounded: about 15 attempts fill 24 h with a 6 h cap
        deliver_due(sessions, clock, settings, sender)
        with sessions() as session:
            delivery = session.get(WebhookDelivery, delivery_id)
        if delivery.state != "pending":
            break
        clock.set(delivery.next_attempt_at)

    with sessions() as session:
        (record,) = outbox_repo.deliveries_of(session, target_id, 10)
        target = session.get(WebhookTarget, target_id)
    times = [a.attempted_at for a in record.attempts]
    gaps = [(b - a).total_seconds() for a, b in itertools.pairwise(times)]
    assert record.delivery.state == "failed"
    assert record.delivery.next_attempt_at is None
    assert times[-1] == START + timedelta(hours=24)  # retried for the whole window, then stopped
    assert 15 <= gaps[0] <= 30
    assert max(gaps) <= settings.webhook_retry_max_interval_seconds
    assert gaps[4] > gaps[0] * 4  # the delays grow exponentially
    assert len({r.headers["webhook-id"] for r in sender.requests}) == 1
    assert target.consecutive_failures == len(times)
    assert target.failing_since == times[4]  # the fifth consecutive failure

    with make_client(db, clock=clock) as client:
        health = client.get("/healthz").json()
        assert health["outbox"]["failing_webhooks"] == [target_id]
        assert client.get(f"/v1/webhooks/{target_id}").json()["failing"] is True

    # One success clears the mark.
    add_events(sessions, "churn", 1, clock.now())
    deliver_due(sessions, clock, settings, RecordingSender())
    with sessions() as session:
        target = session.get(WebhookTarget, target_id)
    assert (target.failing_since, target.consecutive_failures) == (None, 0)
    engine.dispose()


def test_lapsed_claim_is_taken_over_with_the_same_id(db: Database) -> None:
    # A worker claims and dies before recording: after the lease another worker sends it,
    # with the message id the receiver may already have seen.
    settings = db.settings(webhook_claim_seconds=120)
    clock = FixedClock(START)
    engine, sessions = sessions_for(settings)
    add_target(sessions, "http://127.0.0.1:9/hook", START)
    (delivery_id,) = add_events(sessions, "churn", 1, START)
    with sessions() as session:
        claimed = outbox_repo.claim_due(
            session, now=START, token="dead-worker", limit=10, lease=timedelta(seconds=120)
        )
        message_id = session.get(WebhookDelivery, delivery_id).message_id
        session.commit()
    assert claimed == [delivery_id]

    sender = RecordingSender()
    clock.advance(timedelta(seconds=119))
    assert deliver_due(sessions, clock, settings, sender).attempted == 0
    clock.advance(timedelta(seconds=1))
    assert deliver_due(sessions, clock, settings, sender).delivered == 1
    assert [r.headers["webhook-id"] for r in sender.requests] == [message_id]
    engine.dispose()


def test_an_attempt_whose_claim_lapsed_is_not_recorded_over_the_new_holder(db: Database) -> None:
    settings = db.settings()
    engine, sessions = sessions_for(settings)
    add_target(sessions, "http://127.0.0.1:9/hook", START)
    (delivery_id,) = add_events(sessions, "churn", 1, START)
    lease = timedelta(seconds=60)
    with sessions() as session:
        outbox_repo.claim_due(session, now=START, token="old", limit=1, lease=lease)
        session.commit()
    later = START + timedelta(seconds=61)
    with sessions() as session:
        assert outbox_repo.claim_due(session, now=later, token="new", limit=1, lease=lease) == [delivery_id]
        (work,) = outbox_repo.claimed_work(session, [delivery_id])
        session.commit()
    with sessions() as session:
        assert not outbox_repo.renew_claim(session, delivery_id, token="old", now=later, lease=lease)
        kept = outbox_repo.record_attempt(
            session, work, token="old", attempted_at=later, status_code=200, latency_ms=1.0,
            error=None, state="delivered", next_attempt_at=None, finished_at=later,
        )
        session.commit()
    assert kept is False
    with Session(db.engine) as session:
        row = session.scalars(select(WebhookDelivery)).one()
    assert (row.state, row.claim_token) == ("pending", "new")
    engine.dispose()


def test_claims_respect_the_limit_and_open_claims_are_disjoint(db: Database) -> None:
    # Two claim transactions open at once: the second must take other rows, not wait or overlap.
    settings = db.settings()
    engine, sessions = sessions_for(settings)
    add_target(sessions, "http://127.0.0.1:9/hook", START)
    add_events(sessions, "churn", 10, START)
    lease = timedelta(seconds=60)
    first, second = sessions(), sessions()
    try:
        a = outbox_repo.claim_due(first, now=START, token="a", limit=3, lease=lease)
        if db.dialect == "sqlite":
            first.commit()  # SQLite has one writer: the second claim waits for the first
        b = outbox_repo.claim_due(second, now=START, token="b", limit=3, lease=lease)
        first.commit()
        second.commit()
    finally:
        first.close()
        second.close()
    assert len(a) == 3
    assert len(b) == 3
    assert not set(a) & set(b)
    engine.dispose()


def test_concurrent_runs_never_send_one_delivery_twice(db: Database, receiver: Receiver) -> None:
    # Two workers, each with its own engine (as two processes), start together on 40 due
    # deliveries claimed three at a time, against a real receiver.
    settings = db.settings(webhook_allow_private=True, webhook_batch_size=3)
    clock = FixedClock(START)
    setup_engine, setup_sessions = sessions_for(settings)
    add_target(setup_sessions, receiver.url, START)
    add_target(setup_sessions, receiver.url + "/second", START)
    add_events(setup_sessions, "churn", 20, START)
    setup_engine.dispose()

    barrier = threading.Barrier(2, timeout=30)
    results: list[object] = []
    errors: list[BaseException] = []

    def worker() -> None:
        engine, sessions = sessions_for(settings)
        try:
            barrier.wait()
            results.append(deliver_due(sessions, clock, settings, HttpSender(
                allow_private=True, resolver=loopback_resolver)))
        except BaseException as exc:
            errors.append(exc)
        finally:
            engine.dispose()

    threads = [threading.Thread(target=worker) for _ in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert not errors, errors
    ids = receiver.ids()
    assert len(ids) == 40
    assert len(set(ids)) == 40
    assert sum(r.delivered for r in results) == 40
    with Session(db.engine) as session:
        states = set(session.scalars(select(WebhookDelivery.state)))
    assert states == {"delivered"}
