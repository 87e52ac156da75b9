"""/v1/audit: the audit trail, for administrators."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query

from calibrant.api.audit_schemas import AuditPage
from calibrant.api.deps import Admin, RuntimeDep
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.models import audit_trail

router = APIRouter(prefix="/v1/audit", tags=["audit"])


@router.get("", response_model=AuditPage, responses=PROBLEM_RESPONSES,
            summary="Who changed what and when, newest first, filtered and paged")
async def list_audit_events(
    runtime: RuntimeDep,
    _caller: Admin,
    model: Annotated[str | None, Query(description="Only events about this model.")] = None,
    actor: Annotated[str | None, Query(description="Only this actor, e.g. key:3f2a9c01b7d4, local.")] = None,
    action: Annotated[str | None, Query(description="Only this action, e.g. rule.changed.")] = None,
    start: Annotated[str | None, Query(description="Inclusive, RFC 3339 with offset.")] = None,
    end: Annotated[str | None, Query(description="Exclusive, RFC 3339 with offset.")] = None,
    before_id: Annotated[int | None, Query(description="Only events older than this id (paging).")] = None,
    limit: Annotated[int, Query(description="Events per page, 1-1000.")] = 100,
) -> dict[str, Any]:
    return await runtime.run(lambda session: audit_trail.events(
        session, model=model, actor=actor, action=action, start=start, end=end, before_id=before_id,
        limit=limit))
