"""/v1/webhooks: register receivers, change and remove them, ping them, read their delivery log."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Response
from starlette.concurrency import run_in_threadpool

from calibrant.api.deps import Admin, RuntimeDep
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.api.webhook_schemas import (
    AttemptOut,
    DeliveryList,
    DeliveryOut,
    WebhookCreate,
    WebhookCreated,
    WebhookList,
    WebhookOut,
    WebhookUpdate,
)
from calibrant.notify import jobs, registry
from calibrant.store.outbox_repo import DeliveryRecord
from calibrant.store.unit import Session
from calibrant.store.webhook_tables import WebhookTarget

router = APIRouter(prefix="/v1/webhooks", tags=["webhooks"])


def _out(target: WebhookTarget) -> dict:
    return {
        "id": target.id,
        "url": target.url,
        "description": target.description,
        "model": target.model_name,
        "types": list(target.event_types),
        "failing": target.failing_since is not None,
        "failing_since": target.failing_since,
        "consecutive_failures": target.consecutive_failures,
        "last_success_at": target.last_success_at,
        "created_at": target.created_at,
        "updated_at": target.updated_at,
    }


def _delivery_out(record: DeliveryRecord) -> DeliveryOut:
    d = record.delivery
    return DeliveryOut(
        id=d.id,
        webhook_id=d.message_id,
        type=record.kind,
        state=d.state,
        created_at=d.created_at,
        next_attempt_at=d.next_attempt_at,
        finished_at=d.finished_at,
        attempts=[
            AttemptOut(
                number=a.number,
                attempted_at=a.attempted_at,
                status_code=a.status_code,
                latency_ms=a.latency_ms,
                error=a.error,
                next_attempt_at=a.next_attempt_at,
            )
            for a in record.attempts
        ],
    )


@router.post(
    "",
    response_model=WebhookCreated,
    status_code=201,
    responses=PROBLEM_RESPONSES,
    summary="Register a receiver; the response carries its signing secret, shown only once",
)
async def create_webhook(body: WebhookCreate, runtime: RuntimeDep, caller: Admin) -> WebhookCreated:
    def work(session: Session) -> WebhookCreated:
        target, secret = registry.register(
            session,
            url=body.url,
            description=body.description,
            model=body.model,
            event_types=list(body.types),
            allow_private=runtime.settings.webhook_allow_private,
            resolver=runtime.resolver,
            now=runtime.clock.now(),
            actor=caller.actor,
        )
        return WebhookCreated(**_out(target), secret=secret)

    return await runtime.run(work)


@router.get("", response_model=WebhookList, responses=PROBLEM_RESPONSES, summary="Every receiver")
async def list_webhooks(runtime: RuntimeDep, _caller: Admin) -> WebhookList:
    def work(session: Session) -> WebhookList:
        targets = [WebhookOut(**_out(t)) for t in registry.list_all(session)]
        return WebhookList(webhooks=targets, count=len(targets))

    return await runtime.run(work)


@router.get("/{webhook_id}", response_model=WebhookOut, responses=PROBLEM_RESPONSES, summary="One receiver")
async def get_webhook(webhook_id: int, runtime: RuntimeDep, _caller: Admin) -> WebhookOut:
    return await runtime.run(lambda session: WebhookOut(**_out(registry.require(session, webhook_id))))


@router.put(
    "/{webhook_id}",
    response_model=WebhookOut,
    responses=PROBLEM_RESPONSES,
    summary="Change a receiver (absent fields unchanged; the secret stays)",
)
async def put_webhook(webhook_id: int, body: WebhookUpdate, runtime: RuntimeDep, caller: Admin) -> WebhookOut:
    changes = body.model_dump(exclude_unset=True)

    def work(session: Session) -> WebhookOut:
        target = registry.update(
            session,
            webhook_id,
            changes,
            allow_private=runtime.settings.webhook_allow_private,
            resolver=runtime.resolver,
            now=runtime.clock.now(),
            actor=caller.actor,
        )
        return WebhookOut(**_out(target))

    return await runtime.run(work)


@router.delete(
    "/{webhook_id}",
    status_code=204,
    responses=PROBLEM_RESPONSES,
    summary="Remove a receiver and its pending deliveries",
)
async def delete_webhook(webhook_id: int, runtime: RuntimeDep, caller: Admin) -> Response:
    await runtime.run(
        lambda session: registry.remove(session, webhook_id, now=runtime.clock.now(), actor=caller.actor)
    )
    return Response(status_code=204)


@router.post(
    "/{webhook_id}/ping",
    response_model=DeliveryOut,
    status_code=202,
    responses=PROBLEM_RESPONSES,
    summary="Queue a signed test event for this receiver and, by default, attempt it at once",
)
async def ping_webhook(
    webhook_id: int,
    runtime: RuntimeDep,
    _caller: Admin,
    attempt: Annotated[bool, Query(description="Attempt now; false leaves it to the delivery job.")] = True,
) -> DeliveryOut:
    delivery = await runtime.run(lambda session: registry.ping(session, webhook_id, now=runtime.clock.now()))
    if attempt:
        # The same claim path as the delivery job, so a concurrent job run cannot send it twice.
        await run_in_threadpool(
            jobs.deliver_due,
            runtime.sessions,
            runtime.clock,
            runtime.settings,
            runtime.webhook_sender,
            only_ids=[delivery.id],
        )

    def read(session: Session) -> DeliveryOut:
        (record,) = registry.deliveries(session, webhook_id, limit=1, delivery_id=delivery.id)
        return _delivery_out(record)

    return await runtime.run(read)


@router.get(
    "/{webhook_id}/deliveries",
    response_model=DeliveryList,
    responses=PROBLEM_RESPONSES,
    summary="The receiver's newest deliveries, each with every attempt",
)
async def list_deliveries(
    webhook_id: int,
    runtime: RuntimeDep,
    _caller: Admin,
    limit: Annotated[int, Query(ge=1, le=500)] = 100,
) -> DeliveryList:
    def work(session: Session) -> DeliveryList:
        records = registry.deliveries(session, webhook_id, limit)
        return DeliveryList(deliveries=[_delivery_out(r) for r in records], count=len(records))

    return await runtime.run(work)
