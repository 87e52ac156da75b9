"""POST predictions and outcomes. Bodies are read raw and validated column-wise."""

from __future__ import annotations

from collections.abc import Callable
from typing import TypeVar

from fastapi import APIRouter, Request

from calibrant.api.auth import Principal
from calibrant.api.body import read_capped
from calibrant.api.deps import Ingester, RuntimeDep
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import (
    PROBLEM_RESPONSES,
    OutcomeBatchIn,
    OutcomesAccepted,
    PredictionBatchIn,
    PredictionsAccepted,
    request_body,
)
from calibrant.ingest import service
from calibrant.vocabulary.instants import InstantWindow

router = APIRouter(prefix="/v1/models/{model}", tags=["ingest"])
T = TypeVar("T")


@router.post(
    "/predictions",
    response_model=PredictionsAccepted,
    openapi_extra=request_body(PredictionBatchIn),
    responses={**PROBLEM_RESPONSES, 409: {"description": "Same (version, id), different content."}},
    summary="Store scored cases (all or nothing; re-posts are harmless)",
)
async def post_predictions(
    model: str, request: Request, runtime: RuntimeDep, caller: Ingester
) -> PredictionsAccepted:
    result = await _ingest(request, runtime, caller, model, service.ingest_predictions)
    return PredictionsAccepted(accepted=result.accepted, duplicates=result.duplicates, expired=result.expired)


@router.post(
    "/outcomes",
    response_model=OutcomesAccepted,
    openapi_extra=request_body(OutcomeBatchIn),
    responses=PROBLEM_RESPONSES,
    summary="Store true outcomes of cases (new, duplicate or correction)",
)
async def post_outcomes(
    model: str, request: Request, runtime: RuntimeDep, caller: Ingester
) -> OutcomesAccepted:
    result = await _ingest(request, runtime, caller, model, service.ingest_outcomes)
    return OutcomesAccepted(
        accepted=result.accepted, duplicates=result.duplicates, corrected=result.corrected,
        expired=result.expired,
    )


async def _ingest(
    request: Request, runtime: Runtime, caller: Principal, model: str, use_case: Callable[..., T]
) -> T:
    """Read the capped body, run one ingest use case in a committed unit of work."""
    body = await read_capped(request, runtime.settings.max_body_bytes)
    return await runtime.run(
        lambda session: use_case(
            session,
            model,
            body,
            max_items=runtime.settings.max_batch_items,
            window=InstantWindow.of(runtime.settings, runtime.clock.now()),
            clock=runtime.clock,
            actor=caller.actor,
        )
    )
