"""Models: settings (PUT, merge), listing, one model with counts, one case."""

from __future__ import annotations

import orjson
from fastapi import APIRouter, Request, Response

from calibrant.api.body import read_capped
from calibrant.api.deps import Admin, Reader, RuntimeDep
from calibrant.api.job_failure_schemas import JobFailureOut
from calibrant.api.schemas import (
    PROBLEM_RESPONSES,
    CaseOut,
    CaseOutcome,
    CasePrediction,
    ModelCountsOut,
    ModelList,
    ModelOut,
    OutcomeDelayOut,
    request_body,
)
from calibrant.models import isolation, service
from calibrant.models.settings import ModelSettingsPatch
from calibrant.rollup import outcome_delay
from calibrant.store import models_repo
from calibrant.store.tables import Model, Outcome, OutcomeRevision
from calibrant.store.unit import Session

router = APIRouter(prefix="/v1/models", tags=["models"])


def _model_out(model: Model, counts: models_repo.ModelCounts | None = None) -> ModelOut:
    return ModelOut(
        name=model.name,
        **service.settings_of(model),
        created_at=model.created_at,
        updated_at=model.updated_at,
        counts=ModelCountsOut(
            predictions=counts.predictions, outcomes=counts.outcomes, labeled=counts.labeled
        )
        if counts
        else None,
        outcome_delay=_delay_out(model),
    )


def _delay_out(model: Model) -> OutcomeDelayOut | None:
    delay = outcome_delay.stored(model)
    if delay is None:
        return None
    complete = outcome_delay.complete_after(model, delay)
    return OutcomeDelayOut.model_validate({
        "measured_at": delay.measured_at,
        "reports_measured": delay.reports.n,
        "quantiles_days": delay.quantiles_days(),
        "late_event_share": delay.late_event_share,
        "late_events": delay.late_events,
        "complete_after_days": None if complete is None else round(complete.total_seconds() / 86400, 4),
        "by_week": delay.by_week,
    })


@router.get("", response_model=ModelList, summary="All models")
async def list_models(runtime: RuntimeDep, _caller: Reader) -> ModelList:
    models = await runtime.run(models_repo.list_all)
    return ModelList(models=[_model_out(m) for m in models], count=len(models))


@router.put(
    "/{model}",
    response_model=ModelOut,
    openapi_extra=request_body(ModelSettingsPatch),
    responses={**PROBLEM_RESPONSES, 201: {"model": ModelOut, "description": "Created with these settings."}},
    summary="Create a model or change its settings (absent fields unchanged)",
)
async def put_model(
    model: str, request: Request, response: Response, runtime: RuntimeDep, caller: Admin
) -> ModelOut:
    body = await read_capped(request, 1024 * 1024)

    def work(session: Session) -> tuple[ModelOut, bool]:
        row, created = service.put_settings(
            session, model, body, clock=runtime.clock, actor=caller.actor
        )
        return _model_out(row, models_repo.counts(session, row.id)), created

    out, created = await runtime.run(work)
    if created:
        response.status_code = 201
    return out


@router.get("/{model}", response_model=ModelOut, responses=PROBLEM_RESPONSES, summary="One model")
async def get_model(model: str, runtime: RuntimeDep, _caller: Reader) -> ModelOut:
    def work(session: Session) -> ModelOut:
        row = service.require(session, model)
        out = _model_out(row, models_repo.counts(session, row.id))
        out.job_failures = [JobFailureOut.of(r) for r in isolation.failures(session, row.id)]
        return out

    return await runtime.run(work)


@router.get(
    "/{model}/cases/{case_id}",
    response_model=CaseOut,
    responses=PROBLEM_RESPONSES,
    summary="A case: every version's prediction, its outcome and label history",
)
async def get_case(model: str, case_id: str, runtime: RuntimeDep, _caller: Reader) -> CaseOut:
    record = await runtime.run(lambda session: service.case_record(session, model, case_id))
    return CaseOut(
        model=model,
        id=case_id,
        predictions=[
            CasePrediction(
                version=p.version,
                probability=p.probability,
                scored_at=p.scored_at,
                tags=orjson.loads(p.tags) if p.tags else {},
                received_at=p.received_at,
            )
            for p in record.predictions
        ],
        outcome=_outcome(record.outcome) if record.outcome else None,
        history=[_outcome(h) for h in record.history],
    )


def _outcome(row: Outcome | OutcomeRevision) -> CaseOutcome:
    return CaseOutcome(
        label=row.label, observed_at=row.observed_at, occurred_at=row.occurred_at,
        received_at=row.received_at, revision=row.revision
    )
