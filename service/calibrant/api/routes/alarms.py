"""/v1/models/{model}/alarms: list with filters, one alarm, resolve (audited)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request

from calibrant.alarms import service
from calibrant.api.alarm_schemas import AlarmList, AlarmOut
from calibrant.api.auth import Principal, requires
from calibrant.api.routes.rules import _json_object
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.errors import NotFound, invalid
from calibrant.store.keys_repo import Scope

router = APIRouter(prefix="/v1/models/{model}/alarms", tags=["alarms"])
Reader = Annotated[Principal, Depends(requires(Scope.READ))]
Admin = Annotated[Principal, Depends(requires(Scope.ADMIN))]


@router.get("", response_model=AlarmList, responses=PROBLEM_RESPONSES,
            summary="Alarms, newest first, filtered")
async def list_alarms(
    model: str, request: Request, _caller: Reader,
    state: Annotated[str | None, Query(description="open or resolved")] = None,
    rule: Annotated[str | None, Query()] = None,
    version: Annotated[str | None, Query()] = None,
    tag: Annotated[str | None, Query(description="segment key:value")] = None,
    limit: Annotated[int, Query()] = 100,
) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    alarms = await runtime.run(lambda s: service.list_alarms(
        s, model, state=state, rule=rule, version=version, tag=tag, limit=limit))
    return {"model": model, "alarms": alarms, "count": len(alarms)}


@router.get("/{alarm_id}", response_model=AlarmOut, responses=PROBLEM_RESPONSES,
            summary="One alarm with its evidence")
async def get_alarm(model: str, alarm_id: int, request: Request, _caller: Reader) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime

    def work(session):
        found = [a for a in service.list_alarms(session, model, state=None, rule=None, version=None,
                                                tag=None, limit=1000) if a["id"] == alarm_id]
        if not found:
            raise NotFound(f"model {model!r} has no alarm {alarm_id}")
        return found[0]

    return await runtime.run(work)


@router.post("/{alarm_id}/resolve", response_model=AlarmOut, responses=PROBLEM_RESPONSES,
             summary="Resolve an open alarm ({note?}); a chart alarm restarts its chart")
async def resolve(model: str, alarm_id: int, request: Request, caller: Admin) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    body = await _json_object(request)
    note = body.get("note", "")
    if not isinstance(note, str) or len(note) > 2000:
        raise invalid("note", "must be a string of at most 2000 characters")
    return await runtime.run(lambda s: service.alarm_out(service.resolve_by_person(
        s, model, alarm_id, actor=caller.actor, note=note, now=runtime.clock.now())))
