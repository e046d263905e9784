"""Experiments: create one with its plan, read one, list the team's."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Query, Request
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
from service.api.schemas import (
    Error,
    ExperimentCreate,
    ExperimentCreated,
    ExperimentList,
    ExperimentOut,
    State,
)

router = APIRouter(prefix="/v1/experiments", tags=["experiments"])

ERRORS: dict[int | str, dict[str, Any]] = {
    401: {"model": Error, "description": "missing or invalid API key"},
    404: {"model": Error, "description": "no such experiment for this team"},
    409: {"model": Error, "description": "the experiment is stopped or completed, or the "
          "idempotency key was used for another request"},
    413: {"model": Error, "description": "body too large"},
    415: {"model": Error, "description": "the body is not sent as application/json"},
    422: {"model": Error, "description": "invalid request; the message names the field"},
    503: {"model": Error, "description": "the database cannot take the request now; see "
          "Retry-After"},
}


def plan_request(body: Any) -> usecases.PlanRequest:
    design = body.design
    return usecases.PlanRequest(
        document=body.plan,
        design_kind=design.kind if design is not None else None,
        design_inputs=design.arguments() if design is not None else None,
    )


@router.post(
    "",
    status_code=201,
    response_model=ExperimentCreated,
    responses=ERRORS,
    summary="Create an experiment with its plan",
)
def create_experiment(
    principal: PrincipalDep,
    db: DatabaseDep,
    key: IdempotencyKeyDep,
    request: Request,
    body: Annotated[
        ExperimentCreate,
        Body(openapi_examples={"design": examples.CREATE_WITH_DESIGN,
                               "document": examples.CREATE_WITH_PLAN,
                               "experiment plan": examples.CREATE_EXPERIMENT_PLAN}),
    ],
) -> JSONResponse:
    """Create an experiment: metric kind, arm names, planned allocation, and the plan,
    given either as a plan document or as the inputs to design it. The answer carries
    the experiment's id and the plan's boundary table. The plan is frozen from the first
    look on; changes are recorded amendments. A plan of kind `experiment` (one control,
    1 to 8 treatments, primary and guardrail metrics) names its arms and metrics
    itself: `arms`, `metric_kind` and `allocation`, when given, must be the plan's, and
    its boundary table has one row per comparison (arm, metric) and planned look."""
    metric_kind = body.metric_kind if body.metric_kind is not None \
        else body.__dict__["metric"]  # the deprecated name, read without a warning
    fraction_basis = body.fraction_basis if body.fraction_basis is not None \
        else body.__dict__["fraction"]
    arms = body.arms
    given: dict[str, Any] = {"metric_kind": metric_kind, "max_n": body.max_n,
                             "fraction_basis": fraction_basis}
    if "arms" in body.model_fields_set:
        given["arms"] = list(arms) if isinstance(arms, list) else arms.model_dump()
    if "allocation" in body.model_fields_set:
        given["allocation"] = body.allocation
    control, treatment = (arms[0], arms[1]) if isinstance(arms, list) else \
        (arms.control, arms.treatment)
    req = usecases.CreateRequest(
        name=body.name,
        description=body.description,
        metric_kind=metric_kind,
        control_arm=control,
        treatment_arm=treatment,
        allocation=body.allocation,
        max_n=body.max_n,
        fraction_basis=fraction_basis,
        plan=plan_request(body),
        deprecations=body.deprecations(),
        given=given,
    )
    answer = usecases.create_experiment(db, principal, req, idem_for(key, request, body))
    return respond(answer, {"Location": f"/v1/experiments/{answer.body['id']}"})


@router.get(
    "",
    response_model=ExperimentList,
    responses={401: ERRORS[401], 422: ERRORS[422], 503: ERRORS[503]},
    summary="List your team's experiments",
)
def list_experiments(
    principal: PrincipalDep,
    db: DatabaseDep,
    state: Annotated[State | None, Query(description="only experiments in this state")] = None,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
) -> dict[str, Any]:
    """Newest first. States: planned (no look yet), running, stopped (a stop decision),
    completed (final look, or complete without significance)."""
    return usecases.list_experiments(db, principal.team_id, state=state, limit=limit,
                                     offset=offset)


@router.get(
    "/{experiment_id}",
    response_model=ExperimentOut,
    responses={401: ERRORS[401], 404: ERRORS[404], 422: ERRORS[422], 503: ERRORS[503]},
    summary="Read an experiment: plan, looks so far (paged), the latest analysis",
)
def get_experiment(
    principal: PrincipalDep,
    db: DatabaseDep,
    experiment_id: ExperimentIdDep,
    looks_offset: Annotated[int, Query(ge=0, le=10**9, description="first look to list "
                                       "(0 = look 1)")] = 0,
    looks_limit: Annotated[int, Query(ge=1, le=1000, description="looks to list")] = 100,
    versions_offset: Annotated[int, Query(ge=0, le=10**9, description="first plan version "
                                          "to list (0 = version 1)")] = 0,
    versions_limit: Annotated[int, Query(ge=1, le=200, description="plan versions to "
                                         "list")] = 20,
) -> dict[str, Any]:
    return usecases.read_experiment(
        db, principal.team_id, experiment_id, looks_offset=looks_offset,
        looks_limit=looks_limit, versions_offset=versions_offset,
        versions_limit=versions_limit)
