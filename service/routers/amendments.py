"""Plan amendments: a correction to a plan is a new recorded version, never an edit."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Body, Request
from fastapi.responses import JSONResponse

from service import analysis, examples, idempotency, views
from service.auth import PrincipalDep, StorageDep
from service.routers.experiments import _ERRORS
from service.schemas import AmendmentCreate, AmendmentOut
from service.storage import Experiment

router = APIRouter(prefix="/v1/experiments/{experiment_id}/amendments", tags=["amendments"])


@router.post(
    "",
    status_code=201,
    response_model=AmendmentOut,
    responses=_ERRORS,
    summary="Amend the plan (recorded as a new version with its reason)",
)
def amend_plan(
    principal: PrincipalDep,
    storage: StorageDep,
    key: idempotency.IdempotencyKeyDep,
    request: Request,
    experiment_id: str,
    body: Annotated[AmendmentCreate, Body(openapi_examples={"extra look": examples.AMENDMENT})],
) -> JSONResponse:
    """Every earlier version and every stored look stay exactly as they were; looks
    posted from now on are analysed under the new version. The amendment records who
    (the API key), when, why, and after how many looks. Refused (409) once the
    experiment has stopped or completed."""
    plan = analysis.build_plan_from(body)

    def check(exp: Experiment) -> None:
        analysis.resolve_metric(exp.metric, plan)
        analysis.check_sizing(plan, exp.max_n)

    stored = storage.amend_plan(
        principal,
        experiment_id,
        plan,
        body.reason,
        views.amendment,
        idempotency.for_request(key, "POST", request.url.path, body),
        check=check,
    )
    return idempotency.respond(stored)
