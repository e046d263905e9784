"""Experiments: create one with its plan, read one, list the team's."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Body, Query, Request
from fastapi.responses import JSONResponse

from service import analysis, examples, idempotency, views
from service.auth import PrincipalDep, StorageDep
from service.schemas import (
    Error,
    ExperimentCreate,
    ExperimentCreated,
    ExperimentList,
    ExperimentOut,
    State,
)
from service.storage import NewExperiment

router = APIRouter(prefix="/v1/experiments", tags=["experiments"])

_ERRORS = {
    401: {"model": Error, "description": "missing or invalid API key"},
    404: {"model": Error, "description": "no such experiment for this team"},
    409: {"model": Error, "description": "conflict (state, or a reused idempotency key)"},
    413: {"model": Error, "description": "body too large"},
    422: {"model": Error, "description": "invalid request; the message names the field"},
}


@router.post(
    "",
    status_code=201,
    response_model=ExperimentCreated,
    responses=_ERRORS,
    summary="Create an experiment with its plan",
)
def create_experiment(
    principal: PrincipalDep,
    storage: StorageDep,
    key: idempotency.IdempotencyKeyDep,
    request: Request,
    body: Annotated[
        ExperimentCreate,
        Body(
            openapi_examples={
                "design": examples.CREATE_WITH_DESIGN,
                "document": examples.CREATE_WITH_PLAN,
            }
        ),
    ],
) -> JSONResponse:
    """Create an experiment: metric kind, arm names, planned allocation, and the plan,
    given either as a plan document or as the inputs to design it. The answer carries
    the experiment's id and the plan's boundary table. The plan is frozen from the first
    look on; changes are recorded amendments."""
    plan = analysis.build_plan_from(body)
    analysis.check_sizing(plan, body.max_n)
    new = NewExperiment(
        name=body.name,
        description=body.description,
        metric=analysis.resolve_metric(body.metric, plan),
        control_arm=body.arms.control,
        treatment_arm=body.arms.treatment,
        allocation=body.allocation,
        max_n=body.max_n,
        fraction=body.fraction,
    )
    stored = storage.create_experiment(
        principal,
        new,
        plan,
        views.created,
        idempotency.for_request(key, "POST", request.url.path, body),
    )
    return idempotency.respond(
        stored, {"Location": f"/v1/experiments/{stored.body['id']}"}
    )


@router.get(
    "",
    response_model=ExperimentList,
    responses={401: _ERRORS[401], 422: _ERRORS[422]},
    summary="List your team's experiments",
)
def list_experiments(
    principal: PrincipalDep,
    storage: StorageDep,
    state: Annotated[State | None, Query(description="only experiments in this state")] = None,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
) -> dict:
    """Newest first. States: planned (no look yet), running, stopped (a stop decision),
    completed (final look, or complete without significance)."""
    rows, total = storage.list_experiments(
        principal.team_id, state=state, limit=limit, offset=offset
    )
    return {
        "experiments": [views.summary(e) for e in rows],
        "total": total,
        "limit": limit,
        "offset": offset,
    }


@router.get(
    "/{experiment_id}",
    response_model=ExperimentOut,
    responses={401: _ERRORS[401], 404: _ERRORS[404]},
    summary="Read an experiment: plan, every look so far, current decision",
)
def get_experiment(
    principal: PrincipalDep,
    storage: StorageDep,
    experiment_id: str,
) -> dict:
    exp, plans, looks = storage.get_experiment(principal.team_id, experiment_id)
    return views.detail(exp, plans, looks)
