"""/v1/models/{model}/alarms: list with filters, one alarm, resolve (audited)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request

from calibrant.alarms import service
from calibrant.api.alarm_schemas import AlarmList, AlarmOut
from calibrant.api.body import read_json_object
from calibrant.api.deps import Admin, Reader, RuntimeDep
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.errors import NotFound, invalid
from calibrant.store.unit import Session

router = APIRouter(prefix="/v1/models/{model}/alarms", tags=["alarms"])


@router.get("", response_model=AlarmList, responses=PROBLEM_RESPONSES,
            summary="Alarms, newest first, filtered")
async def list_alarms(
    model: str, runtime: RuntimeDep, _caller: Reader,
    state: Annotated[str | None, Query(description="open or resolved")] = None,
    rule: Annotated[str | None, Query()] = None,
    version: Annotated[str | None, Query()] = None,
    tag: Annotated[str | None, Query(description="segment key:value")] = None,
    limit: Annotated[int, Query()] = 100,
) -> dict[str, Any]:
    alarms = await runtime.run(lambda s: service.list_alarms(
        s, model, state=state, rule=rule, version=version, tag=tag, limit=limit))
    return {"model": model, "alarms": alarms, "count": len(alarms)}


@router.get("/{alarm_id}", response_model=AlarmOut, responses=PROBLEM_RESPONSES,
            summary="One alarm with its evidence")
async def get_alarm(model: str, alarm_id: int, runtime: RuntimeDep, _caller: Reader) -> dict[str, Any]:
    def work(session: Session) -> dict[str, Any]:
        found = [a for a in service.list_alarms(session, model, state=None, rule=None, version=None,
                                                tag=None, limit=1000) if a["id"] == alarm_id]
        if not found:
            raise NotFound(f"model {model!r} has no alarm {alarm_id}")
        return found[0]

    return await runtime.run(work)


@router.post("/{alarm_id}/resolve", response_model=AlarmOut, responses=PROBLEM_RESPONSES,
             summary="Resolve an open alarm ({note?}); a chart alarm restarts its chart")
async def resolve(model: str, alarm_id: int, request: Request, runtime: RuntimeDep,
                  caller: Admin) -> dict[str, Any]:
    body = await read_json_object(request)
    note = body.get("note", "")
    if not isinstance(note, str) or len(note) > 2000:
        raise invalid("note", "must be a string of at most 2000 characters")
    return await runtime.run(lambda s: service.alarm_out(service.resolve_by_person(
        s, model, alarm_id, actor=caller.actor, note=note, now=runtime.clock.now())))
