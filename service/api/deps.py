"""Dependencies of the routes: the database, the caller's team, the idempotency key,
and how a write's answer becomes a response."""

from __future__ import annotations

import re
from typing import Annotated, Any

import anyio
from fastapi import Depends, Header, Path, Request
from fastapi.responses import JSONResponse
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from pydantic import BaseModel

from service import usecases
from service.db.engine import Database
from service.db.records import Principal
from service.db.repository import request_hash
from service.errors import Unauthorized, Unprocessable

REPLAYED_HEADER = "Seqtest-Replayed"

bearer = HTTPBearer(
    auto_error=False,
    scheme_name="api_key",
    description="A team's API key, made with `seqtest keys create --team NAME`.",
)
_CHALLENGE = {"WWW-Authenticate": 'Bearer realm="seqtest"'}
_KEY = re.compile(r"^[\x21-\x7e]{1,200}$")
_ID = re.compile(r"^[\x21-\x7e]{1,200}$")


async def get_db(request: Request) -> Database:
    """The app's database (dependency). The dependencies that do no I/O are ``async``,
    so FastAPI calls them on the event loop instead of handing each to the thread pool
    (a hop costs a few hundred microseconds of CPU per request)."""
    db: Database = request.app.state.db
    return db


DatabaseDep = Annotated[Database, Depends(get_db)]


def _token(credentials: HTTPAuthorizationCredentials | None) -> str:
    """The bearer token sent; 401 when there is none."""
    if credentials is None:
        raise Unauthorized(
            "An API key is required: send the header 'Authorization: Bearer <key>'. "
            "An administrator makes keys with `seqtest keys create --team NAME`.",
            headers=_CHALLENGE,
        )
    return credentials.credentials.strip()


def _admitted(request: Request, principal: Principal | None) -> Principal:
    """The caller, once its key was found valid; 401 otherwise."""
    if principal is None:
        raise Unauthorized(
            "The API key is not valid (unknown or revoked). Check it, or ask an "
            "administrator for a new one.",
            headers=_CHALLENGE,
        )
    request.state.team = principal.team_name  # for the access log
    return principal


def _plausible(token: str) -> bool:
    return 0 < len(token) <= 200


def get_principal(
    request: Request,
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(bearer)],
    db: DatabaseDep,
) -> Principal:
    """The team calling, from its API key (dependency); 401 when missing or wrong."""
    token = _token(credentials)
    return _admitted(request, usecases.authenticate(db, token) if _plausible(token) else None)


def get_look_read(
    request: Request,
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(bearer)],
    db: DatabaseDep,
) -> usecases.LookRead:
    """The caller, as :func:`get_principal` (401 first, like every route), and in the
    same read transaction the snapshot of the experiment the look is for
    (dependency of posting a look: one transaction fewer). A malformed id is not
    read; the route's path check answers it."""
    token = _token(credentials)
    exp_id = request.path_params.get("experiment_id")
    if not (isinstance(exp_id, str) and _ID.match(exp_id)):
        exp_id = None
    read = usecases.read_for_look(db, token, exp_id) if _plausible(token) else None
    _admitted(request, None if read is None else read.principal)
    assert read is not None
    return read


PrincipalDep = Annotated[Principal, Depends(get_principal)]
LookReadDep = Annotated[usecases.LookRead, Depends(get_look_read)]


async def look_turns(request: Request) -> anyio.CapacityLimiter:
    """The process's queue of looks (dependency): at most ``looks_at_once`` (a
    setting) are analysed and stored at once, the others wait their turn, first come
    first served (why, with measurements: service/README.md, "Looks take turns").
    Made on first use, inside the event loop."""
    turns: anyio.CapacityLimiter | None = getattr(request.app.state, "look_turns", None)
    if turns is None:
        turns = anyio.CapacityLimiter(request.app.state.settings.looks_at_once)
        request.app.state.look_turns = turns
    return turns


LookTurnsDep = Annotated[anyio.CapacityLimiter, Depends(look_turns)]


async def experiment_id(
    experiment_id: Annotated[str, Path(description="the experiment's id (exp_...)")],
) -> str:
    """The path's experiment id (dependency): printable ASCII, else 422."""
    if not _ID.match(experiment_id):
        raise Unprocessable(
            "experiment_id: got an id with spaces, control or non-ASCII characters; ids look "
            "like 'exp_' followed by 24 hexadecimal digits",
            details=[{"location": ["path", "experiment_id"], "message": "invalid id"}],
        )
    return experiment_id


ExperimentIdDep = Annotated[str, Depends(experiment_id)]


async def idempotency_key(
    idempotency_key: Annotated[
        str | None,
        Header(
            description="unique key for this request (1 to 200 visible ASCII characters); a "
            "retry with the same key returns the first answer and stores nothing"
        ),
    ] = None,
) -> str | None:
    """The header's value (dependency), checked."""
    if idempotency_key is None:
        return None
    if not _KEY.match(idempotency_key):
        raise Unprocessable(
            "The Idempotency-Key header must be 1 to 200 visible ASCII characters "
            "(no spaces), for example a UUID.",
            details=[{"location": ["header", "Idempotency-Key"], "message": "invalid key"}],
        )
    return idempotency_key


IdempotencyKeyDep = Annotated[str | None, Depends(idempotency_key)]


def idem_for(key: str | None, request: Request, body: BaseModel) -> usecases.Idem | None:
    if key is None:
        return None
    return usecases.Idem(key, request_hash("POST", request.url.path,
                                           body.model_dump(mode="json", exclude_unset=True)))


def respond(answer: usecases.Answer, headers: dict[str, str] | None = None) -> JSONResponse:
    h: dict[str, Any] = dict(headers or {})
    if answer.replayed:
        h[REPLAYED_HEADER] = "true"
    if answer.body.get("deprecations"):
        h["Deprecation"] = "true"
    return JSONResponse(answer.body, status_code=answer.status_code, headers=h)
