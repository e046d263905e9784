"""The application factory of the seqtest HTTP service.

    uvicorn --factory service.api:create_app

reads its settings from the environment (``SEQTEST_DATABASE_URL`` and the rest, see
:mod:`service.config`).
"""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI

from service import library, web
from service.api import docs
from service.api.errors import install_error_handlers
from service.api.guard import Guard
from service.api.routers import amendments, experiments, health, looks
from service.config import Settings
from service.db.engine import Database

DESCRIPTION = """\
Post cumulative per-arm totals of a controlled experiment at each interim look and get
the decision of its group-sequential plan: continue, stop for efficacy, stop for
futility, or complete without significance, with the monitor's full analysis.

* Authenticate with a team API key: `Authorization: Bearer <key>`.
* Writes accept an `Idempotency-Key` header; a retry returns the first answer, marked
  `Seqtest-Replayed: true`.
* Every error is JSON: `{"error": {"code", "message", "details"}}`; every answer carries
  `Seqtest-Request-Id`.
* People read the same experiments as pages: sign in at `/` with a team key.

The examples follow an invented shop, Juniper Street Bakery, testing a larger
"Place order" button on its checkout page. seqtest supports, and does not replace, a
qualified statistician and the rules that govern the study.
"""


def create_app(
    database_url: str | None = None,
    *,
    settings: Settings | None = None,
    db: Database | None = None,
    max_body_bytes: int | None = None,
) -> FastAPI:
    """Build the service.

    Parameters
    ----------
    database_url : str, optional
        ``sqlite:///path.db`` (or a bare file path) or ``postgresql://...``;
        overrides the settings' database. The schema is created or upgraded here.
    settings : Settings, optional
        Default: :meth:`Settings.from_env`.
    db : Database, optional
        An open database to use instead of opening one; the app then leaves closing
        it to the caller.
    max_body_bytes : int, optional
        Largest request body accepted (413 above); overrides the settings.
    """
    settings = settings or Settings.from_env()
    if database_url is not None:
        settings = settings.with_(database_url=database_url)
    if max_body_bytes is not None:
        settings = settings.with_(max_body_bytes=max_body_bytes)
    owned = db is None
    database = Database(settings) if db is None else db

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        yield
        if owned:
            database.close()

    app = FastAPI(
        title="seqtest service",
        version=library.library_version(),
        description=DESCRIPTION,
        lifespan=lifespan,
        docs_url=None,  # served by service.api.docs, from a package: no internet needed
        redoc_url=None,
    )
    app.state.db = database
    app.state.settings = settings
    install_error_handlers(app)
    for r in (health.router, experiments.router, looks.router, amendments.router,
              docs.router):
        app.include_router(r)
    web.install(app, database, settings)
    app.add_middleware(Guard, max_bytes=settings.max_body_bytes,
                       body_timeout_s=settings.body_timeout_s,
                       access_log_enabled=settings.access_log,
                       form_paths=web.FORM_PATHS, is_page=web.is_page,
                       page_error=web.error_html)
    return app
