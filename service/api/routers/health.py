"""Health: is the service up, and can its database be read and written."""

from __future__ import annotations

from fastapi import APIRouter
from fastapi.responses import JSONResponse

from service import library
from service.api.deps import DatabaseDep
from service.api.schemas import Error, Health
from service.errors import Unavailable

router = APIRouter(prefix="/v1", tags=["health"])


@router.get(
    "/health",
    response_model=Health,
    responses={503: {"model": Error, "description": "the database cannot be reached, "
                     "or cannot be written"}},
    summary="Service and database health (no API key needed)",
)
def health(db: DatabaseDep) -> JSONResponse:
    """Reads and writes the database cheaply (a write that is rolled back); 503 with the
    reason when the database is unreachable, silent, read-only, full or busy."""
    reason = db.check_writable()
    if reason is not None:
        raise Unavailable(
            f"The {db.dialect} database cannot take writes now ({reason}); reads may still "
            "work. Looks and amendments are refused with 503 until it can.",
            details=[{"location": ["database"], "message": reason}], retry_after=10,
        )
    return JSONResponse({
        "status": "ok",
        "database": db.dialect,
        "writable": True,
        "schema_version": db.schema_version,
        "version": library.library_version(),
    })
