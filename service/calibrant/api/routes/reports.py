"""The monitoring plan, the settings history and the governance report of a model."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from fastapi import APIRouter, Query, Request, Response
from starlette.concurrency import run_in_threadpool

from calibrant.api.body import read_capped
from calibrant.api.deps import Admin, Reader, RuntimeDep
from calibrant.api.report_schemas import HistoryOut, PlanOut, ReportOut
from calibrant.api.schemas import PROBLEM_RESPONSES, request_body
from calibrant.errors import invalid
from calibrant.models.plan import MonitoringPlan
from calibrant.reports import build, history_view, plans, render
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import parse_instant

router = APIRouter(prefix="/v1/models/{model}", tags=["reports"])

AT = Query(None, description="RFC 3339 instant; default now.")
REPORT_MEDIA = {"json": "application/json", "html": "text/html; charset=utf-8", "pdf": "application/pdf"}


def _instant(name: str, text: str | None) -> datetime | None:
    if text is None:
        return None
    parsed = parse_instant(text)
    if isinstance(parsed, str):
        raise invalid(name, parsed)
    return parsed


@router.put("/plan", response_model=PlanOut, openapi_extra=request_body(MonitoringPlan),
            responses=PROBLEM_RESPONSES,
            summary="Set the monitoring plan (a new version; the old ones are kept)")
async def put_plan(model: str, request: Request, runtime: RuntimeDep, caller: Admin) -> dict[str, Any]:
    body = await read_capped(request, 256 * 1024)
    return await runtime.run(
        lambda session: plans.put_plan(session, model, body, actor=caller.actor, now=runtime.clock.now()))


@router.get("/plan", response_model=PlanOut, responses=PROBLEM_RESPONSES,
            summary="The monitoring plan in force at an instant, or one version")
async def get_plan(model: str, runtime: RuntimeDep, _caller: Reader, at: str | None = AT,
                   version: int | None = Query(None, ge=1, description="A version number instead of `at`.")
                   ) -> dict[str, Any]:
    when = _instant("at", at)
    return await runtime.run(
        lambda session: plans.get_plan(session, model, at=when, version=version, now=runtime.clock.now()))


@router.get("/history", response_model=HistoryOut, responses=PROBLEM_RESPONSES,
            summary="The settings and rules in force at an instant, and every change up to it")
async def get_history(model: str, runtime: RuntimeDep, _caller: Reader,
                      at: str | None = AT) -> dict[str, Any]:
    when = _instant("at", at)
    return await runtime.run(
        lambda session: history_view.in_force_at(session, model, at=when, now=runtime.clock.now()))


@router.get(
    "/report",
    response_model=ReportOut,
    responses={**PROBLEM_RESPONSES, 200: {"content": {"text/html": {}, "application/pdf": {}},
                                          "description": "The report as JSON, HTML or PDF."}},
    summary="Governance report of [start, end) as known at as_of (stored as a snapshot)",
)
async def get_report(
    model: str,
    runtime: RuntimeDep,
    caller: Reader,
    start: str | None = Query(None, description="Inclusive, RFC 3339 with offset."),
    end: str | None = Query(None, description="Exclusive, RFC 3339 with offset."),
    as_of: str | None = Query(None, description="Rebuild what was known at this instant; default now."),
    format: str = Query("json", description="json | html | pdf"),
) -> Response:
    if format not in REPORT_MEDIA:
        raise invalid("format", "must be json, html or pdf")

    def work(session: Session) -> build.Report:
        return build.build(session, model, start=start, end=end, as_of=as_of, now=runtime.clock.now(),
                           actor=caller.actor)

    report = await runtime.run(work)
    content = await run_in_threadpool(render.render, report, format)  # a PDF takes CPU: off the event loop
    return Response(content, media_type=REPORT_MEDIA[format])
