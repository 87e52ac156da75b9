"""Metrics of calendar periods, reliability-diagram data, and the uploaded reference."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Query, Request

from calibrant.api.body import read_capped
from calibrant.api.deps import Admin, Reader, RuntimeDep
from calibrant.api.metric_schemas import MetricsOut, ReferenceUploadOut, ReliabilityOut
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.rollup import metrics_service, references

router = APIRouter(prefix="/v1/models/{model}", tags=["metrics"])

START = Query(None, description="Inclusive, RFC 3339 with offset.")
END = Query(None, description="Exclusive, RFC 3339 with offset.")
VERSION = Query(None, description="One model version; without it all versions are pooled.")
TAG = Query([], description="One filter key:value on a declared segment key.")


@router.get(
    "/metrics",
    response_model=MetricsOut,
    responses=PROBLEM_RESPONSES,
    summary="Log-loss, Brier, calibration and more per day, ISO week or month (UTC)",
)
async def get_metrics(
    model: str,
    runtime: RuntimeDep,
    _caller: Reader,
    start: str | None = START,
    end: str | None = END,
    granularity: str = Query("week", description="day | week | month"),
    window: str | None = Query(None, description="Trailing window Nd (1-366) ending at each period's end."),
    version: str | None = VERSION,
    tag: list[str] = TAG,
) -> dict[str, Any]:
    return await runtime.run(
        lambda session: metrics_service.metrics(
            session, model, start=start, end=end, granularity=granularity, window=window,
            version=version, tag=tag, now=runtime.clock.now(),
        )
    )


@router.get(
    "/reliability",
    response_model=ReliabilityOut,
    responses=PROBLEM_RESPONSES,
    summary="Reliability-diagram data: per bin mean predicted, observed rate, count, interval",
)
async def get_reliability(
    model: str,
    runtime: RuntimeDep,
    _caller: Reader,
    start: str | None = START,
    end: str | None = END,
    bins: int = Query(10, description="Number of bins (uniform: a divisor of 20)."),
    strategy: str = Query("uniform", description="uniform | quantile"),
    version: str | None = VERSION,
    tag: list[str] = TAG,
) -> dict[str, Any]:
    return await runtime.run(
        lambda session: metrics_service.reliability(
            session, model, start=start, end=end, bins=bins, strategy=strategy, version=version,
            tag=tag, now=runtime.clock.now(),
        )
    )


@router.post(
    "/reference",
    response_model=ReferenceUploadOut,
    responses=PROBLEM_RESPONSES,
    summary="Upload a validation set (probabilities, optional labels) as the model's reference",
)
async def post_reference(model: str, request: Request, runtime: RuntimeDep, caller: Admin) -> dict[str, Any]:
    body = await read_capped(request, runtime.settings.max_body_bytes)
    return await runtime.run(
        lambda session: references.upload(session, model, body, clock=runtime.clock, actor=caller.actor)
    )
