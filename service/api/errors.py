"""Handlers that turn every error into the JSON error body, with messages people can
act on (the error classes themselves are in :mod:`service.errors`); a request for a
page (:func:`service.web.wants_html`) gets the same message as an HTML page."""

from __future__ import annotations

import types
import typing
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel
from starlette.exceptions import HTTPException as StarletteHTTPException

from service import web
from service.errors import ServiceError, error_body

_STATUS_CODES = {
    400: "bad_request",
    401: "unauthorized",
    403: "forbidden",
    404: "not_found",
    405: "method_not_allowed",
    406: "not_acceptable",
    409: "conflict",
    413: "payload_too_large",
    415: "unsupported_media_type",
    422: "invalid_request",
}


def _location_text(loc: tuple[Any, ...] | list[Any]) -> str:
    parts = [str(p) for p in loc]
    return ".".join(parts) if parts else "request"


def _models_in(annotation: Any) -> list[type[BaseModel]]:
    """The pydantic models an annotation may hold (through Optional, unions, Annotated)."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType, typing.Annotated):
        out: list[type[BaseModel]] = []
        for arg in typing.get_args(annotation):
            out += _models_in(arg)
        return out
    return []


def _allowed_fields(request: Request, loc: list[Any]) -> list[str] | None:
    """The fields allowed where an unknown one was found (``loc`` ends with it)."""
    route = request.scope.get("route")
    body_field = getattr(route, "body_field", None)
    if body_field is None or not loc or loc[0] != "body":
        return None
    models = _models_in(getattr(body_field.field_info, "annotation", None))
    for part in loc[1:-1]:
        nxt: list[type[BaseModel]] = []
        for m in models:
            f = m.model_fields.get(str(part))
            if f is not None:
                nxt += _models_in(f.annotation)
        models = nxt
    if len(models) != 1:
        return None
    return [name for name, f in models[0].model_fields.items() if not f.deprecated]


def _validation_details(request: Request, exc: RequestValidationError) -> list[dict[str, Any]]:
    details = []
    for e in exc.errors():
        loc = list(e.get("loc", ()))
        msg = str(e.get("msg", "invalid value"))
        # pydantic prefixes messages of custom validators with "Value error, ".
        if msg.startswith("Value error, "):
            msg = msg[len("Value error, "):]
        kind = e.get("type")
        if kind == "extra_forbidden":
            allowed = _allowed_fields(request, loc)
            msg = f"unknown field {str(loc[-1])!r}"
            if allowed:
                msg += f"; allowed here are {', '.join(allowed)}"
        elif kind == "missing":
            msg = "missing; this field is required"
        elif kind == "json_invalid":
            ctx = e.get("ctx") or {}
            msg = f"the body is not valid JSON ({ctx.get('error', 'parse error')})"
        details.append({"location": loc, "message": msg})
    return details


def _validation_message(details: list[dict[str, Any]]) -> str:
    if not details:
        return "The request is not valid."
    first = details[0]
    text = f"{_location_text(first['location'])}: {first['message']}"
    if len(details) > 1:
        text += f" (and {len(details) - 1} more problem(s), listed in details)"
    return "The request is not valid: " + text


def install_error_handlers(app: FastAPI) -> None:
    """Register handlers so that every error leaves the service as JSON.

    Unexpected exceptions are handled (and logged once) by the guard middleware."""

    @app.exception_handler(ServiceError)
    async def _service_error(request: Request, exc: ServiceError) -> Response:
        if web.wants_html(request):
            return web.error_page(request, exc.status, exc.message, headers=exc.headers)
        return JSONResponse(exc.body(), status_code=exc.status, headers=exc.headers)

    @app.exception_handler(RequestValidationError)
    async def _validation_error(request: Request, exc: RequestValidationError) -> Response:
        details = _validation_details(request, exc)
        if web.wants_html(request):
            return web.error_page(request, 422, _validation_message(details))
        return JSONResponse(
            error_body("invalid_request", _validation_message(details), details),
            status_code=422,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> Response:
        if web.wants_html(request):
            message = {404: f"There is no page {request.url.path}.",
                       405: f"{request.method} is not allowed on {request.url.path}."
                       }.get(exc.status_code, str(exc.detail))
            return web.error_page(request, exc.status_code, message, headers=exc.headers)
        code = _STATUS_CODES.get(exc.status_code, "error")
        if exc.status_code == 404 and exc.detail == "Not Found":
            message = (
                f"There is no route {request.method} {request.url.path}; "
                "the routes are listed at /docs and /openapi.json."
            )
        elif exc.status_code == 405:
            message = (
                f"{request.method} is not allowed on {request.url.path}; "
                "the allowed methods are listed at /docs."
            )
        elif exc.status_code == 400 and exc.detail == "There was an error parsing the body":
            message = "The body could not be read as JSON; send a JSON object."
        else:
            message = str(exc.detail)
        return JSONResponse(
            error_body(code, message), status_code=exc.status_code, headers=exc.headers
        )
