"""/v1/models/{model}/rules: list, create, read, change, delete rules; replay one over history."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request, Response

from calibrant.alarms import backtest, service
from calibrant.api.alarm_schemas import BacktestOut, RuleList, RuleOut
from calibrant.api.body import read_json_object
from calibrant.api.deps import Admin, Reader, RuntimeDep
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.store.unit import Session

router = APIRouter(prefix="/v1/models/{model}/rules", tags=["rules"])


@router.get("", response_model=RuleList, responses=PROBLEM_RESPONSES,
            summary="The model's rules, each with what it detects, its minimum data and its share of "
                    "the model's one false-alarm budget")
async def list_rules(model: str, runtime: RuntimeDep, _caller: Reader) -> dict[str, Any]:
    listed = await runtime.run(lambda s: service.list_rules(s, model, runtime.clock.now()))
    return {"model": model, "rules": listed["rules"], "count": len(listed["rules"]),
            "budget": listed["budget"]}


@router.post("", response_model=RuleOut, status_code=201, responses=PROBLEM_RESPONSES,
             summary="Add a rule: {name, kind, params?, enabled?}")
async def create_rule(model: str, request: Request, runtime: RuntimeDep, caller: Admin) -> dict[str, Any]:
    body = await read_json_object(request)
    return await runtime.run(lambda s: service.create_rule(
        s, model, body, actor=caller.actor, now=runtime.clock.now()))


@router.get("/{rule}", response_model=RuleOut, responses=PROBLEM_RESPONSES,
            summary="One rule, with its chart streams")
async def get_rule(model: str, rule: str, runtime: RuntimeDep, _caller: Reader) -> dict[str, Any]:
    return await runtime.run(lambda s: service.get_rule(s, model, rule, runtime.clock.now()))


@router.put("/{rule}", response_model=RuleOut, responses=PROBLEM_RESPONSES,
            summary="Change a rule: {params?, enabled?} (params merged; chart state restarts)")
async def update_rule(model: str, rule: str, request: Request, runtime: RuntimeDep,
                      caller: Admin) -> dict[str, Any]:
    body = await read_json_object(request)
    return await runtime.run(lambda s: service.update_rule(
        s, model, rule, body, actor=caller.actor, now=runtime.clock.now()))


@router.delete("/{rule}", status_code=204, responses=PROBLEM_RESPONSES,
               summary="Delete a rule (its open alarms are resolved)")
async def delete_rule(model: str, rule: str, runtime: RuntimeDep, caller: Admin) -> Response:
    await runtime.run(lambda s: service.delete_rule(s, model, rule, actor=caller.actor,
                                                    now=runtime.clock.now()))
    return Response(status_code=204)


@router.post("/{rule}/backtest", response_model=BacktestOut, responses=PROBLEM_RESPONSES,
             summary="When the rule would have crossed its limit over [start, end); stores and sends nothing")
async def run_backtest(model: str, rule: str, runtime: RuntimeDep, _caller: Reader,
                       start: Annotated[str | None, Query()] = None,
                       end: Annotated[str | None, Query()] = None) -> dict[str, Any]:
    def work(session: Session) -> dict[str, Any]:
        try:
            return backtest.backtest(session, model, rule, start=start, end=end,
                                     now=runtime.clock.now())
        finally:
            session.rollback()  # a replay leaves no trace, whatever it touched

    return await runtime.run(work)
