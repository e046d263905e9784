"""The application factory of the seqtest HTTP service.

    uvicorn --factory service.app:create_app

reads ``SEQTEST_DATABASE_URL`` (default: SQLite file ``./seqtest.db``).
"""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI

from service import analysis
from service.errors import install_error_handlers
from service.limits import DEFAULT_MAX_BODY_BYTES, BodySizeLimit
from service.routers import amendments, experiments, health, looks
from service.storage import Storage

DESCRIPTION = """\
Post cumulative per-arm totals of a controlled experiment at each interim look and get
the decision of its group-sequential plan: continue, stop for efficacy, stop for
futility, or complete without significance, with the monitor's full analysis.

* Authenticate with a team API key: `Authorization: Bearer <key>`.
* Writes accept an `Idempotency-Key` header; a retry returns the first answer.
* Every error is JSON: `{"error": {"code", "message", "details"}}`.

The examples follow an invented shop, Juniper Street Bakery, testing a larger
"Place order" button on its checkout page.
"""


def create_app(
    database_url: str | None = None,
    *,
    max_body_bytes: int = DEFAULT_MAX_BODY_BYTES,
    storage: Storage | None = None,
) -> FastAPI:
    """Build the service.

    Parameters
    ----------
    database_url : str, optional
        ``sqlite:///path.db`` (or a bare file path) or ``postgresql://...``.
        Default: the environment variable ``SEQTEST_DATABASE_URL``, else
        ``./seqtest.db``. The schema is created or upgraded here.
    max_body_bytes : int
        Largest request body accepted; larger ones get 413.
    storage : Storage, optional
        An open storage to use instead of opening ``database_url``; the app then
        leaves closing it to the caller.
    """
    owned = storage is None
    store = Storage(database_url) if storage is None else storage

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        yield
        if owned:
            store.close()

    app = FastAPI(
        title="seqtest service",
        version=analysis.library_version(),
        description=DESCRIPTION,
        lifespan=lifespan,
    )
    app.state.storage = store
    install_error_handlers(app)
    for r in (health.router, experiments.router, looks.router, amendments.router):
        app.include_router(r)
    app.add_middleware(BodySizeLimit, max_bytes=max_body_bytes)
    return app
