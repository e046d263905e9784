"""The ``Idempotency-Key`` header of write requests.

A client that may retry a POST (timeouts, dropped connections) sends a fresh
unique key with it, for example a UUID. The first successful answer is stored
with the key in the same transaction as the write; a retry with the same key
and the same request gets that answer again (header ``Idempotent-Replayed:
true``) and stores nothing. The same key with a different request is refused
with 409. Requests that fail store nothing, so their key may be used again.
Keys belong to a team: two teams never see each other's keys.
"""

from __future__ import annotations

import re
from typing import Annotated, Any

from fastapi import Depends, Header
from fastapi.responses import JSONResponse
from pydantic import BaseModel

from service.errors import Unprocessable
from service.storage import Idempotency, Stored, request_hash

_KEY = re.compile(r"^[\x21-\x7e]{1,200}$")

REPLAYED_HEADER = "Idempotent-Replayed"


def idempotency_key(
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


def for_request(key: str | None, method: str, path: str, body: BaseModel) -> Idempotency | None:
    if key is None:
        return None
    return Idempotency(key, request_hash(method, path, body.model_dump(mode="json")))


def respond(stored: Stored, headers: dict[str, str] | None = None) -> JSONResponse:
    h: dict[str, Any] = dict(headers or {})
    if stored.replayed:
        h[REPLAYED_HEADER] = "true"
    return JSONResponse(stored.body, status_code=stored.status_code, headers=h)
