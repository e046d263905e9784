"""Errors the service raises for people: an HTTP status, a stable code, a message.

Raised by the use cases, the library adapter and the database layer; turned into
the JSON error body ``{"error": {"code", "message", "details"}}`` by
:mod:`service.api.errors`. ``message`` is a sentence a person can act on;
``details`` (optional) lists the individual problems, each with a ``location``
(e.g. ``["body", "arms", "control"]``) and its own ``message``.
"""

from __future__ import annotations

from typing import Any


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
        return error_body(self.code, self.message, self.details)


def error_body(
    code: str, message: str, details: list[dict[str, Any]] | None = None
) -> dict[str, Any]:
    err: dict[str, Any] = {"code": code, "message": message}
    if details:
        err["details"] = details
    return {"error": err}


class Unauthorized(ServiceError):
    status = 401
    code = "unauthorized"


class NotFound(ServiceError):
    status = 404
    code = "not_found"


class RequestTimeout(ServiceError):
    status = 408
    code = "request_timeout"


class Conflict(ServiceError):
    status = 409
    code = "conflict"


class StateConflict(Conflict):
    """The experiment's state does not allow the write (stopped or completed)."""

    code = "experiment_closed"


class IdempotencyConflict(Conflict):
    code = "idempotency_key_reused"


class PayloadTooLarge(ServiceError):
    status = 413
    code = "payload_too_large"


class UnsupportedMediaType(ServiceError):
    status = 415
    code = "unsupported_media_type"


class Unprocessable(ServiceError):
    status = 422
    code = "invalid_request"


class InvalidTotals(Unprocessable):
    code = "invalid_totals"


class InvalidPlan(Unprocessable):
    code = "invalid_plan"


class AnalysisFailed(Unprocessable):
    """The library could not compute on these totals under this plan."""

    code = "analysis_failed"


class Unavailable(ServiceError):
    """The service cannot do this now (database unreachable, read-only, full, busy)."""

    status = 503
    code = "unavailable"

    def __init__(
        self,
        message: str,
        *,
        details: list[dict[str, Any]] | None = None,
        headers: dict[str, str] | None = None,
        retry_after: int = 5,
    ) -> None:
        h = {"Retry-After": str(int(retry_after))}
        h.update(headers or {})
        super().__init__(message, details=details, headers=h)
