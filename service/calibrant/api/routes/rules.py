"""/v1/models/{model}/rules: list, create, read, change, delete rules; replay one over history."""

from __future__ import annotations

from typing import Annotated, Any

import orjson
from fastapi import APIRouter, Depends, Query, Request, Response

from calibrant.alarms import backtest, service
from calibrant.api.alarm_schemas import BacktestOut, RuleList, RuleOut
from calibrant.api.auth import Principal, requires
from calibrant.api.body import read_capped
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.errors import FieldError, InvalidInput
from calibrant.store.keys_repo import Scope

router = APIRouter(prefix="/v1/models/{model}/rules", tags=["rules"])
Reader = Annotated[Principal, Depends(requires(Scope.READ))]
Admin = Annotated[Principal, Depends(requires(Scope.ADMIN))]
MAX_BODY = 64 * 1024


async def _json_object(request: Request) -> dict[str, Any]:
    body = await read_capped(request, MAX_BODY)
    try:
        doc = orjson.loads(body or b"{}")
    except orjson.JSONDecodeError as exc:
        raise InvalidInput("body is not valid JSON", [FieldError(None, "body", str(exc))]) from None
    if not isinstance(doc, dict):
        raise InvalidInput("body must be an object", [FieldError(None, "body", "expected an object")])
    return doc


@router.get("", response_model=RuleList, responses=PROBLEM_RESPONSES,
            summary="The model's rules, each with what it detects, its minimum data and false-alarm rate")
async def list_rules(model: str, request: Request, _caller: Reader) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    rules = await runtime.run(lambda s: service.list_rules(s, model, runtime.clock.now()))
    return {"model": model, "rules": rules, "count": len(rules)}


@router.post("", response_model=RuleOut, status_code=201, responses=PROBLEM_RESPONSES,
             summary="Add a rule: {name, kind, params?, enabled?}")
async def create_rule(model: str, request: Request, caller: Admin) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    body = await _json_object(request)
    return await runtime.run(lambda s: service.create_rule(
        s, model, body, actor=caller.actor, now=runtime.clock.now()))


@router.get("/{rule}", response_model=RuleOut, responses=PROBLEM_RESPONSES,
            summary="One rule, with its chart streams")
async def get_rule(model: str, rule: str, request: Request, _caller: Reader) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    return await runtime.run(lambda s: service.get_rule(s, model, rule, runtime.clock.now()))


@router.put("/{rule}", response_model=RuleOut, responses=PROBLEM_RESPONSES,
            summary="Change a rule: {params?, enabled?} (params merged; chart state restarts)")
async def update_rule(model: str, rule: str, request: Request, caller: Admin) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    body = await _json_object(request)
    return await runtime.run(lambda s: service.update_rule(
        s, model, rule, body, actor=caller.actor, now=runtime.clock.now()))


@router.delete("/{rule}", status_code=204, responses=PROBLEM_RESPONSES,
               summary="Delete a rule (its open alarms are resolved)")
async def delete_rule(model: str, rule: str, request: Request, caller: Admin) -> Response:
    runtime: Runtime = request.app.state.runtime
    await runtime.run(lambda s: service.delete_rule(s, model, rule, actor=caller.actor,
                                                    now=runtime.clock.now()))
    return Response(status_code=204)


@router.post("/{rule}/backtest", response_model=BacktestOut, responses=PROBLEM_RESPONSES,
             summary="When the rule would have crossed its limit over [start, end); stores and sends nothing")
async def run_backtest(model: str, rule: str, request: Request, _caller: Reader,
                       start: Annotated[str | None, Query()] = None,
                       end: Annotated[str | None, Query()] = None) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime

    def work(session):
        try:
            return backtest.backtest(session, model, rule, start=start, end=end,
                                     now=runtime.clock.now())
        finally:
            session.rollback()  # a replay leaves no trace, whatever it touched

    return await runtime.run(work)
