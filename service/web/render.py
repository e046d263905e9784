"""Templates (Jinja2, autoescaped) and the headers every page carries.

Pages load nothing from anywhere: the style sheet is inline, charts are inline SVG,
and no page has a script. The ``Content-Security-Policy`` says so to the browser
(``default-src 'none'``: no script, font, image or frame from anywhere; inline styles
only; forms post only to this service), so a name or a reason typed by a user can
never become a script even if escaping were missed somewhere.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import Any

from fastapi import Request
from fastapi.responses import HTMLResponse
from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

from service import library

CSP = ("default-src 'none'; style-src 'unsafe-inline'; img-src 'self' data:; "
       "form-action 'self'; frame-ancestors 'none'; base-uri 'none'")
PAGE_HEADERS = {
    "Content-Security-Policy": CSP,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
    "Cache-Control": "no-store",  # pages hold a team's data
    "X-Frame-Options": "DENY",
}


@functools.lru_cache(maxsize=1)
def environment() -> Environment:
    env = Environment(
        loader=PackageLoader("service.web", "templates"),
        autoescape=select_autoescape(["html"]),
        undefined=StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.globals["caution"] = library.caution()
    env.globals["version"] = library.library_version()
    return env


def render(request: Request, template: str, context: dict[str, Any], *, status: int = 200
           ) -> HTMLResponse:
    ctx = {"team": None, **context}
    html = environment().get_template(template).render(**ctx)
    return HTMLResponse(html, status_code=status, headers=PAGE_HEADERS)


TITLES = {
    400: "Bad request",
    403: "Not allowed",
    404: "Not found",
    405: "Method not allowed",
    422: "Not valid",
    500: "Something went wrong",
    503: "Unavailable for now",
}


def error_html(status: int, message: str, request_id: str | None = None,
               team: str | None = None) -> str:
    """An error page: a sentence about what happened, never a trace."""
    return environment().get_template("error.html").render(
        title=TITLES.get(status, "Error"), status=status, message=message,
        request_id=request_id, team=team)


def error_page(request: Request, status: int, message: str, *, team: str | None = None,
               headers: Mapping[str, str] | None = None) -> HTMLResponse:
    rid = getattr(request.state, "request_id", None) or \
        request.scope.get("state", {}).get("request_id")
    h = {**PAGE_HEADERS, **(headers or {})}
    return HTMLResponse(error_html(status, message, rid, team), status_code=status,
                        headers=h)
