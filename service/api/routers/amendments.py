"""Plan amendments: a correction to a plan is a new recorded version, never an edit."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Body, Request
from fastapi.responses import JSONResponse

from service import usecases
from service.api import examples
from service.api.deps import (
    DatabaseDep,
    ExperimentIdDep,
    IdempotencyKeyDep,
    PrincipalDep,
    idem_for,
    respond,
)
from service.api.routers.experiments import ERRORS, plan_request
from service.api.schemas import AmendmentCreate, AmendmentOut

router = APIRouter(prefix="/v1/experiments/{experiment_id}/amendments", tags=["amendments"])


@router.post(
    "",
    status_code=201,
    response_model=AmendmentOut,
    responses=ERRORS,
    summary="Amend the plan (recorded as a new version with its reason)",
)
def amend_plan(
    principal: PrincipalDep,
    db: DatabaseDep,
    key: IdempotencyKeyDep,
    request: Request,
    experiment_id: ExperimentIdDep,
    body: Annotated[AmendmentCreate, Body(openapi_examples={"extra look": examples.AMENDMENT})],
) -> JSONResponse:
    """Every earlier version and every stored look stay exactly as they were; looks
    posted from now on are analysed under the new version. Design inputs start from
    the current version's: give only what changes (e.g. `{"design": {"looks": 8}}`);
    `max_n` may change too. The amendment records who (the API key), when, why, and
    after how many looks. Refused (409) once the experiment has stopped or completed."""
    req = usecases.AmendRequest(reason=body.reason, plan=plan_request(body), max_n=body.max_n,
                                deprecations=body.deprecations())
    answer = usecases.amend_plan(db, principal, experiment_id, req,
                                 idem_for(key, request, body))
    return respond(answer)
