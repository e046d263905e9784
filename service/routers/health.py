"""Health: is the service up and its database reachable."""

from __future__ import annotations

from fastapi import APIRouter

from service import analysis
from service.auth import StorageDep
from service.schemas import Error, Health

router = APIRouter(prefix="/v1", tags=["health"])


@router.get(
    "/health",
    response_model=Health,
    responses={503: {"model": Error, "description": "the database cannot be reached"}},
    summary="Service and database health (no API key needed)",
)
def health(storage: StorageDep) -> dict:
    """Runs one trivial query on the database."""
    storage.ping()
    return {
        "status": "ok",
        "database": storage.dialect,
        "schema_version": storage.schema_version,
        "version": analysis.library_version(),
    }
