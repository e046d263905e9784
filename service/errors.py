"""Errors the service raises, and the handlers that turn every error into JSON.

Every error body has the same shape::

    {"error": {"code": "...", "message": "...", "details": [...]}}

``message`` is a sentence a person can act on; ``details`` (optional) lists the
individual problems, each with a ``location`` (e.g. ``["body", "arms", "n"]``)
and its own ``message``.
"""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

log = logging.getLogger("seqtest.service")


class ServiceError(Exception):
    """An error with an HTTP status, a stable code and a message for people."""

    status = 400
    code = "bad_request"

    def __init__(
        self,
        message: str,
        *,
        details: list[dict[str, Any]] | None = None,
        headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(message)
        self.message = message
        self.details = details
        self.headers = headers

    def body(self) -> dict[str, Any]:
        err: dict[str, Any] = {"code": self.code, "message": self.message}
        if self.details:
            err["details"] = self.details
        return {"error": err}


class Unauthorized(ServiceError):
    status = 401
    code = "unauthorized"


class NotFound(ServiceError):
    status = 404
    code = "not_found"


class Conflict(ServiceError):
    status = 409
    code = "conflict"


class IdempotencyConflict(Conflict):
    code = "idempotency_key_reused"


class PayloadTooLarge(ServiceError):
    status = 413
    code = "payload_too_large"


class Unprocessable(ServiceError):
    status = 422
    code = "invalid_request"


class InvalidTotals(Unprocessable):
    code = "invalid_totals"


class InvalidPlan(Unprocessable):
    code = "invalid_plan"


class Unavailable(ServiceError):
    status = 503
    code = "unavailable"


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


def error_body(code: str, message: str, details: list[dict[str, Any]] | None = None) -> dict:
    err: dict[str, Any] = {"code": code, "message": message}
    if details:
        err["details"] = details
    return {"error": err}


def _location_text(loc: tuple | list) -> str:
    parts = [str(p) for p in loc]
    return ".".join(parts) if parts else "request"


def _validation_details(exc: RequestValidationError) -> list[dict[str, Any]]:
    details = []
    for e in exc.errors():
        loc = list(e.get("loc", ()))
        msg = str(e.get("msg", "invalid value"))
        # pydantic prefixes messages of custom validators with "Value error, ".
        if msg.startswith("Value error, "):
            msg = msg[len("Value error, ") :]
        item: dict[str, Any] = {"location": loc, "message": msg}
        if e.get("type") == "json_invalid":
            ctx = e.get("ctx") or {}
            item["message"] = f"the body is not valid JSON ({ctx.get('error', 'parse error')})"
        details.append(item)
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
    """Register handlers so that every error leaves the service as JSON."""

    @app.exception_handler(ServiceError)
    async def _service_error(request: Request, exc: ServiceError) -> JSONResponse:
        return JSONResponse(exc.body(), status_code=exc.status, headers=exc.headers)

    @app.exception_handler(RequestValidationError)
    async def _validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        details = _validation_details(exc)
        return JSONResponse(
            error_body("invalid_request", _validation_message(details), details),
            status_code=422,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
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

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error on %s %s", request.method, request.url.path)
        return JSONResponse(
            error_body(
                "internal_error",
                "The service hit an unexpected error; nothing was stored by this request. "
                "Retry later, and report it if it persists.",
            ),
            status_code=500,
        )
