"""The delivery job: claim due deliveries, sign and send each, record what happened.

A plain function of (session factory, clock, settings, sender), so the
scheduler, ``calibrant webhooks deliver`` and the tests call the same thing.
Each run uses a fresh claim token, so two runs — in two threads or two
processes — never attempt one delivery at the same time.
"""

from __future__ import annotations

import logging
import random
import uuid
from dataclasses import dataclass, field
from datetime import timedelta

from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.models.isolation import ModelGuard
from calibrant.notify import outbox, signing
from calibrant.notify.senders import OutgoingRequest, Sender, SendResult
from calibrant.store import outbox_repo, webhook_targets_repo
from calibrant.store.outbox_repo import ClaimedDelivery
from calibrant.store.unit import SessionFactory
from calibrant.store.webhook_tables import DELIVERED, FAILED

log = logging.getLogger("calibrant.notify")

JOB_NAME = "deliver_webhooks"
MAX_BATCHES = 1000  # bounds one run; a backlog beyond batch size × this waits for the next run


@dataclass
class DeliveryStats:
    """What one run did."""

    attempted: int = 0
    delivered: int = 0
    retrying: int = 0
    failed: int = 0
    claims_lost: int = 0  # claims that lapsed before the attempt (another worker took over)

    def as_dict(self) -> dict[str, int]:
        return {
            "attempted": self.attempted,
            "delivered": self.delivered,
            "retrying": self.retrying,
            "failed": self.failed,
            "claims_lost": self.claims_lost,
        }


def deliver_due(
    session_factory: SessionFactory,
    clock: Clock,
    settings: Settings,
    sender: Sender,
    *,
    rng: random.Random | None = None,
    only_ids: list[int] | None = None,
    max_batches: int = MAX_BATCHES,
    guard: ModelGuard | None = None,
) -> DeliveryStats:
    """Attempt every delivery that is due now, batch by batch, until none is left.

    ``only_ids`` limits the run to some deliveries (an immediate ping). A
    delivery that fails is rescheduled in the future, so it is not attempted
    twice in one run. With a ``guard``, a delivery whose handling raises (not a failed
    send, which is an ordinary retry) holds back its event's model, not the other models.
    """
    run = _Run(
        session_factory=session_factory,
        clock=clock,
        settings=settings,
        sender=sender,
        token=uuid.uuid4().hex,
        lease=timedelta(seconds=settings.webhook_claim_seconds),
        rng=rng or random.Random(),  # noqa: S311 — jitter, not a secret
    )
    for _ in range(max_batches):
        with session_factory() as session:
            ids = outbox_repo.claim_due(
                session,
                now=clock.now(),
                token=run.token,
                limit=settings.webhook_batch_size,
                lease=run.lease,
                only_ids=only_ids,
                skip_models=guard.held_back() if guard else (),
            )
            work = outbox_repo.claimed_work(session, ids)
            session.commit()
        if not work:
            break
        for delivery in work:
            if guard is None or delivery.model_id is None:
                run.attempt(delivery)
            elif guard.allows(delivery.model_id):
                with guard.unit(delivery.model_id):
                    run.attempt(delivery)
    return run.stats


@dataclass
class _Run:
    session_factory: SessionFactory
    clock: Clock
    settings: Settings
    sender: Sender
    token: str
    lease: timedelta
    rng: random.Random
    stats: DeliveryStats = field(default_factory=DeliveryStats)

    def attempt(self, delivery: ClaimedDelivery) -> None:
        _attempt(self, delivery)


def _attempt(run: _Run, delivery: ClaimedDelivery) -> None:
    session_factory, clock, settings, stats = run.session_factory, run.clock, run.settings, run.stats
    token, lease = run.token, run.lease
    # Renew just before sending: the claim then covers this whole attempt even if the
    # batch before it was slow, and a lapsed claim is noticed before anything is sent.
    with session_factory() as session:
        renewed = outbox_repo.renew_claim(session, delivery.id, token=token, now=clock.now(), lease=lease)
        session.commit()
    if not renewed:
        stats.claims_lost += 1
        return
    attempted_at = clock.now()
    body = delivery.body.encode()
    request = OutgoingRequest(
        url=delivery.url,
        body=body,
        headers=signing.headers(delivery.secret, delivery.message_id, int(attempted_at.timestamp()), body),
        timeout=settings.webhook_timeout_seconds,
    )
    result = _send(run.sender, request)
    decision = outbox.verdict(
        delivered=result.delivered,
        attempted_at=attempted_at,
        created_at=delivery.created_at,
        failed_attempts=delivery.attempts + 1,
        retry_after=result.retry_after,
        settings=settings,
        rng=run.rng,
    )
    with session_factory() as session:
        kept = outbox_repo.record_attempt(
            session,
            delivery,
            token=token,
            attempted_at=attempted_at,
            status_code=result.status_code,
            latency_ms=result.latency_ms,
            error=result.error,
            state=decision.state,
            next_attempt_at=decision.next_attempt_at,
            finished_at=decision.finished_at,
        )
        webhook_targets_repo.record_result(
            session,
            delivery.target_id,
            delivered=result.delivered,
            now=attempted_at,
            failing_after=settings.webhook_failing_after,
        )
        session.commit()
    stats.attempted += 1
    if not kept:
        stats.claims_lost += 1
        log.warning("webhook %s: claim lapsed during the attempt", delivery.message_id)
    elif decision.state == DELIVERED:
        stats.delivered += 1
    elif decision.state == FAILED:
        stats.failed += 1
        log.warning("webhook %s to %s: giving up after %d attempts",
                    delivery.message_id, delivery.url, delivery.attempts + 1)
    else:
        stats.retrying += 1


def _send(sender: Sender, request: OutgoingRequest) -> SendResult:
    """A sender that raises is recorded as a failed attempt, so the delivery is retried."""
    try:
        return sender.send(request)
    except Exception as exc:
        log.exception("webhook sender raised")
        return SendResult(False, None, 0.0, f"sender error: {type(exc).__name__}: {exc}"[:500])
