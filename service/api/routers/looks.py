"""Looks: post cumulative per-arm totals, get the monitor's answer (stored once)."""

from __future__ import annotations

import functools
from typing import Annotated, Any

import anyio
from fastapi import APIRouter, Body, Path, Request
from fastapi.responses import JSONResponse

from service import usecases
from service.api import examples
from service.api.deps import (
    DatabaseDep,
    ExperimentIdDep,
    IdempotencyKeyDep,
    LookReadDep,
    LookTurnsDep,
    PrincipalDep,
    idem_for,
    respond,
)
from service.api.routers.experiments import ERRORS
from service.api.schemas import LookCreate, LookOut

router = APIRouter(prefix="/v1/experiments/{experiment_id}/looks", tags=["looks"])


@router.post(
    "",
    status_code=201,
    response_model=LookOut,
    responses=ERRORS,
    summary="Record a look: cumulative totals per arm",
)
async def post_look(
    read: LookReadDep,
    turns: LookTurnsDep,
    db: DatabaseDep,
    key: IdempotencyKeyDep,
    request: Request,
    experiment_id: ExperimentIdDep,
    body: Annotated[
        LookCreate,
        Body(openapi_examples={"binary": examples.LOOK_BINARY,
                               "continuous": examples.LOOK_CONTINUOUS,
                               "experiment plan": examples.LOOK_EXPERIMENT}),
    ],
) -> JSONResponse:
    """Totals are cumulative since the start and keyed by the experiment's arm names.
    The look is numbered (1, 2, ...), analysed by the monitor over every look so far,
    and its own result stored once, in one transaction. Totals that go backwards,
    unknown arms and fields that do not fit the metric are refused with 422 naming the
    field. A stopped or completed experiment refuses looks with 409. An experiment plan
    (many arms) takes `{arm: totals}` (one metric) or `{metric: {arm: totals}}`, with
    the control and every arm still running; an arm that stopped may still be posted
    (checked, not analysed); refusals are located at `["body", "totals", (metric,) arm,
    field]`."""
    req = usecases.LookRequest(totals=body.totals, final=body.final,
                               daily_traffic=body.daily_traffic)
    work = functools.partial(usecases.append_look, db, read.principal, experiment_id, req,
                             idem_for(key, request, body), read=read)
    answer = await anyio.to_thread.run_sync(work, limiter=turns)  # in its turn
    return respond(answer, {
        "Location": f"/v1/experiments/{experiment_id}/looks/{answer.body['look']}"})


@router.get(
    "/{number}",
    response_model=LookOut,
    responses={401: ERRORS[401], 404: ERRORS[404], 422: ERRORS[422], 503: ERRORS[503]},
    summary="Read one stored look and the analysis at it",
)
def get_look(
    principal: PrincipalDep,
    db: DatabaseDep,
    experiment_id: ExperimentIdDep,
    number: Annotated[int, Path(ge=1, le=10**9)],
) -> dict[str, Any]:
    return usecases.read_look(db, principal.team_id, experiment_id, number)
