"""The pages: what a signed-in team sees in a browser.

Layout (above the use cases, below the HTTP app that mounts it)::

    pages.py     the routes, sign-in and sign-out, the session check
    session.py   the signed session cookie and its secret
    data.py      what the pages read (the API's use cases, and a few reads of db.site)
    present.py   what each page shows, from the library's reporting package
    design.py    the design form: fields, reading them, messages per field
    render.py    Jinja2 templates and the headers every page carries
    templates/   the HTML templates and the inline style sheet

:func:`install` adds the pages to the app; :func:`is_page` tells the HTTP layer which
requests are pages, so that their errors are pages too.
"""

from __future__ import annotations

import threading

from fastapi import FastAPI, Request
from fastapi.responses import Response

from service.config import Settings
from service.db.engine import Database
from service.web.pages import SignInRequired, router, sign_in_redirect
from service.web.render import error_html, error_page
from service.web.session import Signer, signing_secret

__all__ = ["error_html", "error_page", "install", "is_page", "wants_html"]

_PAGE_ROOTS = ("/experiments", "/design", "/signin", "/signout")
FORM_PATHS = ("/signin", "/signout")


PAGE_METHODS = ("GET", "HEAD", "POST")


def is_page(method: str, path: str) -> bool:
    """A request for a page (an HTML answer, errors included): a method browsers use
    on a path the pages serve."""
    return method in PAGE_METHODS and (
        path == "/" or any(path == r or path.startswith(r + "/") for r in _PAGE_ROOTS))


def wants_html(request: Request) -> bool:
    """A request whose error should be a page: a page's, or a browser asking for
    HTML anywhere outside the JSON API."""
    path = request.url.path
    if is_page(request.method, path):
        return True
    if path.startswith("/v1/") or path == "/v1" or path.startswith("/openapi"):
        return False
    return "text/html" in request.headers.get("accept", "")


def install(app: FastAPI, db: Database, settings: Settings) -> None:
    """Add the pages to ``app``: the routes, the redirect to sign-in, and the session
    signer, made on the first page request (its secret from the settings, or from the
    database, so an app that only answers the API never reads it)."""
    lock = threading.Lock()

    def signer() -> Signer:
        with lock:
            made: Signer | None = getattr(app.state, "session_signer", None)
            if made is None:
                made = Signer(signing_secret(db, settings.session_secret),
                              settings.session_max_age_s)
                app.state.session_signer = made
            return made

    app.state.session_signer = None
    app.state.make_session_signer = signer
    app.include_router(router)

    @app.exception_handler(SignInRequired)
    async def _sign_in(request: Request, exc: SignInRequired) -> Response:
        return sign_in_redirect(exc)
