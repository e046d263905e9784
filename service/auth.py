"""API keys: one team per key, sent as ``Authorization: Bearer <key>``.

Keys are random tokens (``sqt_`` + 32 random bytes, URL-safe base64) made by
``seqtest keys create``. The database keeps only their SHA-256; see
service/README.md for why a fast hash is the right one here.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from service.errors import Unauthorized
from service.storage import Principal, Storage

bearer = HTTPBearer(
    auto_error=False,
    scheme_name="api_key",
    description="A team's API key, made with `seqtest keys create --team NAME`.",
)

_CHALLENGE = {"WWW-Authenticate": 'Bearer realm="seqtest"'}


def get_storage(request: Request) -> Storage:
    """The app's storage (dependency)."""
    return request.app.state.storage


StorageDep = Annotated[Storage, Depends(get_storage)]


def get_principal(
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(bearer)],
    storage: StorageDep,
) -> Principal:
    """The team calling, from its API key (dependency); 401 when missing or wrong."""
    if credentials is None:
        raise Unauthorized(
            "An API key is required: send the header 'Authorization: Bearer <key>'. "
            "An administrator makes keys with `seqtest keys create --team NAME`.",
            headers=_CHALLENGE,
        )
    token = credentials.credentials.strip()
    principal = storage.authenticate(token) if 0 < len(token) <= 200 else None
    if principal is None:
        raise Unauthorized(
            "The API key is not valid (unknown or revoked). Check it, or ask an "
            "administrator for a new one.",
            headers=_CHALLENGE,
        )
    return principal


PrincipalDep = Annotated[Principal, Depends(get_principal)]
