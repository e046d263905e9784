"""The routes of the pages (HTML, rendered on the server; no script runs in them).

=====================  =================================================================
``GET /``              the list of experiments, or the sign-in form
``GET /signin``        the sign-in form (``?next=`` the page to go back to)
``POST /signin``       a team's API key -> the session cookie, then back to ``next``
``POST /signout``      clears the cookie
``GET /experiments``   the team's experiments (``?state=``, ``?offset=``)
``GET /experiments/{id}``  one experiment: decision, charts, looks, plan and versions
``GET /design``        design a plan from a form; stores nothing
=====================  =================================================================

A page without a valid session (no cookie, a changed or forged one, an expired one,
or one whose key was revoked) redirects to the sign-in form, which brings the person
back afterwards. A form post must come from this service's own pages (its ``Origin``
header, when sent, must be this service). Errors are pages too: 404 for another
team's experiment, exactly as for an absent one.
"""

from __future__ import annotations

import json
from typing import Annotated, Any
from urllib.parse import parse_qsl, quote, urlsplit

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import RedirectResponse, Response
from markupsafe import Markup
from starlette.concurrency import run_in_threadpool

from service import library, usecases
from service.db.engine import Database
from service.db.records import Principal
from service.errors import ServiceError
from service.web import data, design, present
from service.web.render import error_page, render
from service.web.session import COOKIE, BadCookie, Signer

router = APIRouter(include_in_schema=False)

MAX_FORM_BYTES = 4096
STATES = ("planned", "running", "stopped", "completed")


class SignInRequired(Exception):
    """The page needs a signed-in team; the handler redirects to the sign-in form."""

    def __init__(self, next_path: str, reason: str | None = None, *, clear: bool = False
                 ) -> None:
        super().__init__(reason or "sign in")
        self.next_path = next_path
        self.reason = reason
        self.clear = clear


def _db(request: Request) -> Database:
    db: Database = request.app.state.db
    return db


def _signer(request: Request) -> Signer:
    signer: Signer | None = request.app.state.session_signer
    return signer if signer is not None else request.app.state.make_session_signer()


def _here(request: Request) -> str:
    path = request.url.path
    return path + (f"?{request.url.query}" if request.url.query else "")


def safe_next(value: str | None) -> str:
    """A page of this service to go back to after signing in (never another site)."""
    if not value or len(value) > 1000:
        return "/experiments"
    parts = urlsplit(value)
    if parts.scheme or parts.netloc or not value.startswith("/") or value.startswith("//") \
            or "\\" in value or any(ord(c) < 32 for c in value):
        return "/experiments"
    if parts.path in ("/signin", "/signout"):
        return "/experiments"
    return value


def session_principal(request: Request) -> Principal | None:
    """The signed-in team, or None; raises :class:`SignInRequired` for a cookie that is
    present but no longer good (so that it is cleared)."""
    cookie = request.cookies.get(COOKIE)
    if not cookie:
        return None
    try:
        session = _signer(request).read(cookie)
    except BadCookie as exc:
        reason = "Your session has expired; sign in again." if exc.expired else \
            "Please sign in."
        raise SignInRequired(_here(request), reason, clear=True) from None
    principal = data.principal(_db(request), session)
    if principal is None:
        raise SignInRequired(_here(request), "The key you signed in with is no longer "
                             "valid (revoked); sign in with another.", clear=True)
    request.state.team = principal.team_name  # for the access log
    return principal


def page_principal(request: Request) -> Principal:
    """The signed-in team (dependency of every page but sign-in)."""
    principal = session_principal(request)
    if principal is None:
        raise SignInRequired(_here(request))
    return principal


PagePrincipal = Annotated[Principal, Depends(page_principal)]


def sign_in_redirect(exc: SignInRequired) -> Response:
    target = "/signin"
    query = []
    if exc.next_path and safe_next(exc.next_path) != "/experiments":
        query.append("next=" + quote(exc.next_path, safe=""))
    if exc.reason:
        query.append("why=" + ("expired" if "expired" in exc.reason else
                               "revoked" if "revoked" in exc.reason else "signin"))
    if query:
        target += "?" + "&".join(query)
    response = RedirectResponse(target, status_code=303)
    if exc.clear:
        response.delete_cookie(COOKIE, path="/", httponly=True, samesite="strict")
    response.headers["Cache-Control"] = "no-store"
    return response


_WHY = {
    "expired": "Your session has expired; sign in again.",
    "revoked": "The key you signed in with is no longer valid (revoked); sign in with "
               "another.",
    "signin": "Please sign in.",
    "signedout": "You are signed out.",
}


def _same_origin(request: Request) -> bool:
    """A form post from this service's own page: ``Origin`` (sent by browsers on every
    POST) must name this host; a cross-site fetch is refused too."""
    if request.headers.get("sec-fetch-site", "") == "cross-site":
        return False
    origin = request.headers.get("origin")
    if origin is None:
        return True
    host = request.headers.get("host", "")
    return origin in (f"http://{host}", f"https://{host}")


async def _form(request: Request) -> dict[str, str]:
    body = await request.body()
    if len(body) > MAX_FORM_BYTES:
        return {}
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError:
        return {}
    try:
        pairs = parse_qsl(text, keep_blank_values=True, max_num_fields=20)
    except ValueError:
        return {}
    return {k: v for k, v in pairs if "\x00" not in k and "\x00" not in v}


# --------------------------------------------------------------------------- routes


@router.get("/")
def home(request: Request) -> Response:
    try:
        principal = session_principal(request)
    except SignInRequired as exc:
        return sign_in_redirect(SignInRequired("", exc.reason, clear=exc.clear))
    return RedirectResponse("/experiments" if principal else "/signin", status_code=303)


@router.get("/signin")
def sign_in_form(request: Request, next: str | None = None, why: str | None = None
                 ) -> Response:
    return render(request, "signin.html", {
        "title": "Sign in", "next": safe_next(next), "message": _WHY.get(why or ""),
        "error": None,
    })


@router.post("/signin")
async def sign_in(request: Request) -> Response:
    if not _same_origin(request):
        return error_page(request, 403, "This form must be sent from this service's own "
                          "sign-in page.")
    form = await _form(request)
    next_path = safe_next(form.get("next"))
    key = form.get("key", "").strip()
    principal = None
    if 0 < len(key) <= 200 and all(32 < ord(c) < 127 for c in key):
        principal = await run_in_threadpool(usecases.authenticate, _db(request), key)
    if principal is None:
        error = ("Type the team's API key." if not key else
                 "That key is not valid (unknown or revoked). Check it, or ask an "
                 "administrator for a new one (seqtest keys create --team NAME).")
        return render(request, "signin.html", {
            "title": "Sign in", "next": next_path, "message": None, "error": error,
        }, status=401 if key else 422)
    signer = await run_in_threadpool(_signer, request)
    response = RedirectResponse(next_path, status_code=303)
    response.set_cookie(COOKIE, signer.issue(principal.key_id, principal.team_id),
                        max_age=signer.max_age_s, path="/", httponly=True,
                        samesite="strict", secure=request.url.scheme == "https")
    response.headers["Cache-Control"] = "no-store"
    request.state.team = principal.team_name
    return response


@router.post("/signout")
async def sign_out(request: Request) -> Response:
    if not _same_origin(request):
        return error_page(request, 403, "This form must be sent from this service's own "
                          "pages.")
    response = RedirectResponse("/signin?why=signedout", status_code=303)
    response.delete_cookie(COOKIE, path="/", httponly=True, samesite="strict",
                           secure=request.url.scheme == "https")
    response.headers["Cache-Control"] = "no-store"
    return response


@router.get("/experiments")
def experiment_list(
    request: Request, principal: PagePrincipal,
    state: Annotated[str | None, Query(max_length=20)] = None,
    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
) -> Response:
    if state not in STATES:
        state = None
    found = data.experiments(_db(request), principal.team_id, state=state, offset=offset)
    total = int(found.listing["total"])
    base = "/experiments?" + (f"state={state}&" if state else "")
    return render(request, "list.html", {
        "title": "Experiments", "team": principal.team_name,
        "rows": present.list_rows(found), "total": total, "state": state,
        "states": STATES, "offset": offset, "shown": len(found.listing["experiments"]),
        "previous": f"{base}offset={max(0, offset - data.LIST_PAGE)}" if offset else None,
        "next": f"{base}offset={offset + data.LIST_PAGE}"
        if offset + data.LIST_PAGE < total else None,
    })


@router.get("/experiments/{experiment_id}")
def experiment_page(request: Request, principal: PagePrincipal, experiment_id: str
                    ) -> Response:
    if not (0 < len(experiment_id) <= 200) or not experiment_id.isprintable():
        return error_page(request, 404, "There is no such experiment for your team.",
                          team=principal.team_name)
    try:
        found = data.experiment(_db(request), principal.team_id, experiment_id)
    except ServiceError as exc:
        if exc.status == 404:
            return error_page(request, 404, f"There is no experiment {experiment_id!r} for "
                              "your team.", team=principal.team_name)
        raise
    context = present.experiment_context(found)
    return render(request, "experiment.html", {
        "title": found.detail["name"], "team": principal.team_name, **context,
    })


@router.get("/design")
def design_page(request: Request, principal: PagePrincipal) -> Response:
    query = dict(request.query_params)
    result = None
    if query:
        form = design.read_form(query)
        result = design.design(form)
    else:
        form = design.empty_form()
    status = 200 if not form.submitted or result is not None else 422
    context: dict[str, Any] = {
        "title": "Design a plan", "team": principal.team_name, "form": form,
        "fields": design.FIELDS, "result": result,
    }
    if result is not None:
        shown = result.display
        context["plan_table"] = Markup(library.table_html(*shown.table)) \
            if shown.table else None
        context["expected"] = _expected_rows(shown.expected, result.inputs)
        context["body"] = json.dumps({"design": result.inputs}, indent=2)
    return render(request, "design.html", context, status=status)


def _expected_rows(expected: dict[str, Any] | None, inputs: dict[str, Any]
                   ) -> list[tuple[str, str]]:
    if not expected:
        return []
    who = "units of exposure" if (inputs.get("metric") or {}).get("kind") == "rate" \
        else "users"
    count = library.number_text

    def share(x: float) -> str:
        return f" ({100 * x / expected['max_total']:.0f}% of the maximum)"

    return [
        (f"Maximum {who} (both arms)",
         f"{count('count', expected['max_total'])}: control "
         f"{count('count', expected['max_control'])}, treatment "
         f"{count('count', expected['max_treatment'])}"),
        (f"Expected {who} if there is no effect",
         count("count", expected["expected_null"]) + share(expected["expected_null"])),
        (f"Expected {who} at the minimum detectable effect",
         count("count", expected["expected_alternative"])
         + share(expected["expected_alternative"])),
        ("A fixed-sample test with the same alpha and power",
         count("count", expected["fixed_total"])),
    ]
