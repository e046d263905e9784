"""Looks: post cumulative per-arm totals, get the monitor's answer (stored)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Path, Request
from fastapi.responses import JSONResponse

from service import analysis, examples, idempotency, views
from service.auth import PrincipalDep, StorageDep
from service.errors import NotFound
from service.routers.experiments import _ERRORS
from service.schemas import LookCreate, LookOut
from service.storage import Experiment, NewLook, PlanVersion

router = APIRouter(prefix="/v1/experiments/{experiment_id}/looks", tags=["looks"])


@router.post(
    "",
    status_code=201,
    response_model=LookOut,
    responses=_ERRORS,
    summary="Record a look: cumulative totals per arm",
)
def post_look(
    principal: PrincipalDep,
    storage: StorageDep,
    key: idempotency.IdempotencyKeyDep,
    request: Request,
    experiment_id: str,
    body: Annotated[
        LookCreate,
        Body(openapi_examples={"binary": examples.LOOK_BINARY,
                               "continuous": examples.LOOK_CONTINUOUS}),
    ],
) -> JSONResponse:
    """Totals are cumulative since the start and keyed by the experiment's arm names.
    The look is numbered (1, 2, ...), analysed by the monitor over every look so far,
    and stored with the analysis in one transaction. Totals that go backwards, unknown
    arms and fields that do not fit the metric are refused with 422 naming the field."""

    def compute(exp: Experiment, plan: PlanVersion, prior: list[dict[str, Any]]) -> NewLook:
        return analysis.analyze_look(
            exp, plan, prior, body.totals, body.final, body.daily_traffic
        )

    stored = storage.append_look(
        principal,
        experiment_id,
        compute,
        views.look,
        idempotency.for_request(key, "POST", request.url.path, body),
    )
    return idempotency.respond(
        stored, {"Location": f"/v1/experiments/{experiment_id}/looks/{stored.body['look']}"}
    )


@router.get(
    "/{number}",
    response_model=LookOut,
    responses={401: _ERRORS[401], 404: _ERRORS[404]},
    summary="Read one stored look and its analysis",
)
def get_look(
    principal: PrincipalDep,
    storage: StorageDep,
    experiment_id: str,
    number: Annotated[int, Path(ge=1, le=10**9)],
) -> dict:
    exp, _plans, looks = storage.get_experiment(principal.team_id, experiment_id)
    if number > len(looks):
        raise NotFound(
            f"Experiment {experiment_id!r} has {len(looks)} look(s); there is no look {number}."
        )
    return views.look(exp, looks[number - 1])
