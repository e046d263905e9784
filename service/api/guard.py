"""The outermost layer of every request (plain ASGI middleware).

Before the app sees a request:

- a request id (``Seqtest-Request-Id`` on every answer; in the body of a 500);
- path and query: NUL and other control characters are refused (422);
- a body must come within ``body_timeout_s`` of the headers (408 otherwise) and be at
  most ``max_bytes`` (413, announced by Content-Length or found while reading);
- a POST with a body must say ``Content-Type: application/json`` (415 otherwise);
- the body must be JSON without NUL characters or lone surrogates in any string or
  key, without NaN or Infinity, and without number literals longer than 40
  characters (422, naming the location); invalid JSON is left to the app's own
  message.

After: an answer with status 500 or above carries ``Connection: close``; an
unexpected exception is logged once (its class, the request id, the traceback
without database parameters) and answered with a JSON 500 that gives the request
id and does not claim that nothing was stored; one access-log line per request
names the team.

Pages (``is_page(method, path)``): the forms of ``form_paths`` are posted as
``application/x-www-form-urlencoded`` (their fields are read by the page itself),
and every refusal above, and the 500, is an HTML page (``page_error``) with the same
message and the request id, never a trace.
"""

from __future__ import annotations

import asyncio
import json
import logging
import secrets
import time
from collections.abc import Callable
from typing import Any

from service.errors import error_body
from service.logs import format_exception, request_id_var

log = logging.getLogger("seqtest.service")
access_log = logging.getLogger("seqtest.access")

REQUEST_ID_HEADER = "Seqtest-Request-Id"
MAX_NUMBER_CHARS = 40


class _Bad:
    """A value refused while parsing (kept, so that the walk can name its location)."""

    def __init__(self, why: str) -> None:
        self.why = why


def _number(kind: type) -> Any:
    def parse(literal: str) -> Any:
        if len(literal) > MAX_NUMBER_CHARS:
            return _Bad(f"a number written with {len(literal)} characters; allowed are at "
                        f"most {MAX_NUMBER_CHARS}")
        return kind(literal)
    return parse


def _constant(literal: str) -> _Bad:
    return _Bad(f"{literal} is not allowed; give a finite number")


def _text_problem(s: str) -> str | None:
    if "\x00" in s:
        return "contains a NUL character, which is not allowed"
    try:
        s.encode("utf-8")
    except UnicodeEncodeError:
        return "contains a lone surrogate (an unpaired \\ud800-\\udfff escape), which is not " \
               "allowed"
    return None


def find_problem(value: Any, location: list[Any]) -> tuple[list[Any], str] | None:
    """The first refused value in a parsed body, with its location."""
    stack: list[tuple[Any, list[Any]]] = [(value, location)]
    while stack:
        v, loc = stack.pop()
        if isinstance(v, _Bad):
            return loc, v.why
        if isinstance(v, str):
            why = _text_problem(v)
            if why:
                return loc, f"the text {why}"
        elif isinstance(v, float):
            if v != v or v in (float("inf"), float("-inf")):
                return loc, "the number is not finite (NaN and Infinity are not allowed); " \
                            "give a finite number"
        elif isinstance(v, dict):
            for k, item in reversed(list(v.items())):
                why = _text_problem(k)
                if why:
                    return [*loc, _printable(k)], f"the key {why}"
                stack.append((item, [*loc, k]))
        elif isinstance(v, list):
            for i in range(len(v) - 1, -1, -1):
                stack.append((v[i], [*loc, i]))
    return None


def _printable(s: str) -> str:
    """``s`` with control characters and lone surrogates written as escapes."""
    out = []
    for c in s:
        o = ord(c)
        if o < 32 or o == 127:
            out.append(f"\\x{o:02x}")
        elif 0xD800 <= o <= 0xDFFF:
            out.append(f"\\u{o:04x}")
        else:
            out.append(c)
    return "".join(out)


def _has_control(s: str) -> bool:
    return any(ord(c) < 32 or ord(c) == 127 for c in s)


async def _send_json(send: Any, status: int, body: dict[str, Any], request_id: str,
                     headers: list[tuple[bytes, bytes]] | None = None,
                     close: bool = False) -> None:
    payload = json.dumps(body).encode("utf-8")
    h = [(b"content-type", b"application/json"),
         (b"content-length", str(len(payload)).encode("ascii")),
         (REQUEST_ID_HEADER.lower().encode(), request_id.encode("ascii"))]
    h += headers or []
    if close or status >= 500:
        h.append((b"connection", b"close"))
    await send({"type": "http.response.start", "status": status, "headers": h})
    await send({"type": "http.response.body", "body": payload})


async def _send_html(send: Any, status: int, html: str, request_id: str,
                     close: bool = False) -> None:
    payload = html.encode("utf-8")
    h = [(b"content-type", b"text/html; charset=utf-8"),
         (b"content-length", str(len(payload)).encode("ascii")),
         (b"cache-control", b"no-store"),
         (b"x-content-type-options", b"nosniff"),
         (REQUEST_ID_HEADER.lower().encode(), request_id.encode("ascii"))]
    if close or status >= 500:
        h.append((b"connection", b"close"))
    await send({"type": "http.response.start", "status": status, "headers": h})
    await send({"type": "http.response.body", "body": payload})


class Guard:
    """See the module docstring."""

    def __init__(self, app: Any, max_bytes: int = 64 * 1024, body_timeout_s: float = 30.0,
                 access_log_enabled: bool = True, form_paths: tuple[str, ...] = (),
                 is_page: Callable[[str, str], bool] | None = None,
                 page_error: Callable[[int, str, str], str] | None = None) -> None:
        self.app = app
        self.max_bytes = int(max_bytes)
        self.body_timeout_s = float(body_timeout_s)
        self.access_log_enabled = access_log_enabled
        self.form_paths = frozenset(form_paths)
        self.is_page = is_page
        self.page_error = page_error

    def _too_large(self) -> dict[str, Any]:
        return error_body(
            "payload_too_large",
            f"The request body is larger than {self.max_bytes} bytes, the most this service "
            "accepts. Looks and plans are far smaller; check what is being sent.",
        )

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request_id = secrets.token_hex(8)
        token = request_id_var.set(request_id)
        scope.setdefault("state", {})["request_id"] = request_id
        started = time.perf_counter()
        status_box = [0]
        try:
            await self._handle(scope, receive, send, request_id, status_box)
        finally:
            if self.access_log_enabled:
                client = scope.get("client") or ("-", 0)
                qs = scope.get("query_string", b"")
                path = scope.get("path", "") + ("?" + qs.decode("latin-1") if qs else "")
                access_log.info(
                    '%s:%s "%s %s HTTP/%s" %d %.1fms team=%s',
                    client[0], client[1], scope.get("method"), _printable(path),
                    scope.get("http_version", "1.1"), status_box[0],
                    (time.perf_counter() - started) * 1000,
                    scope["state"].get("team") or "-",
                )
            request_id_var.reset(token)

    async def _handle(self, scope: dict[str, Any], receive: Any, send: Any,
                      request_id: str, status_box: list[int]) -> None:
        path = scope.get("path", "")
        page = self.is_page is not None and self.page_error is not None and \
            self.is_page(scope.get("method", "GET"), path)

        async def reply(status: int, body: dict[str, Any],
                        headers: list[tuple[bytes, bytes]] | None = None,
                        close: bool = False) -> None:
            status_box[0] = status
            if page and self.page_error is not None:
                html = self.page_error(status, body["error"]["message"], request_id)
                await _send_html(send, status, html, request_id, close)
                return
            await _send_json(send, status, body, request_id, headers, close)

        if _has_control(path):
            await reply(422, error_body(
                "invalid_request", "The path contains a NUL or another control character, "
                "which no id or route has; check the URL.",
                [{"location": ["path"], "message": "control character"}]))
            return
        query = scope.get("query_string", b"")
        if b"%00" in query or any(b < 32 for b in query):
            await reply(422, error_body(
                "invalid_request", "The query string contains a NUL or another control "
                "character; check the parameters.",
                [{"location": ["query"], "message": "control character"}]))
            return

        headers = dict(scope.get("headers", ()))
        method = scope.get("method", "GET")
        length_raw = headers.get(b"content-length")
        if length_raw is not None:
            try:
                length = int(length_raw)
            except ValueError:
                length = -1
            if length < 0:
                await reply(400, error_body("bad_request",
                                            "The Content-Length header is not a number."),
                            close=True)
                return
            if length > self.max_bytes:
                await reply(413, self._too_large(), close=True)
                return

        # read the body, within the time allowed
        chunks: list[bytes] = []
        size = 0
        deadline = time.monotonic() + self.body_timeout_s
        while True:
            remaining = deadline - time.monotonic()
            try:
                if remaining <= 0:
                    raise asyncio.TimeoutError
                message = await asyncio.wait_for(receive(), timeout=remaining)
            except asyncio.TimeoutError:
                await reply(408, error_body(
                    "request_timeout",
                    f"The request body did not arrive within {self.body_timeout_s:g} s of "
                    "its headers; send the whole body at once."), close=True)
                return
            if message["type"] == "http.disconnect":
                return
            chunk = message.get("body", b"")
            size += len(chunk)
            if size > self.max_bytes:
                await reply(413, self._too_large(), close=True)
                return
            chunks.append(chunk)
            if not message.get("more_body", False):
                break
        body = b"".join(chunks)

        form = method == "POST" and path in self.form_paths
        if body and method in ("POST", "PUT", "PATCH"):
            ctype = headers.get(b"content-type", b"").decode("latin-1").split(";")[0]
            ctype = ctype.strip().lower()
            if form:
                if ctype != "application/x-www-form-urlencoded":
                    await reply(415, error_body(
                        "unsupported_media_type", "This form must be sent as "
                        "application/x-www-form-urlencoded, as a browser sends it."))
                    return
            elif ctype != "application/json" and not ctype.endswith("+json"):
                got = f"'{_printable(ctype)}'" if ctype else "none"
                await reply(415, error_body(
                    "unsupported_media_type",
                    f"Content-Type: got {got}; allowed is application/json. Send the body "
                    "as JSON with the header 'Content-Type: application/json'.",
                    [{"location": ["header", "Content-Type"], "message": "not JSON"}]))
                return
            try:
                text = body.decode("utf-8")
                parsed = json.loads(text, parse_int=_number(int), parse_float=_number(float),
                                    parse_constant=_constant)
            except ValueError:
                parsed = None  # not JSON: the app says so in its own words
            else:
                problem = find_problem(parsed, ["body"])
                if problem is not None:
                    loc, why = problem
                    where = ".".join(str(p) for p in loc)
                    await reply(422, error_body(
                        "invalid_request", f"The request is not valid: {where}: {why}.",
                        [{"location": loc, "message": why}]))
                    return

        delivered = False

        async def replay() -> dict[str, Any]:
            nonlocal delivered
            if not delivered:
                delivered = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        started = False

        async def send_wrapped(message: dict[str, Any]) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
                status_box[0] = int(message["status"])
                extra = [(REQUEST_ID_HEADER.lower().encode(), request_id.encode("ascii"))]
                if message["status"] >= 500:
                    extra.append((b"connection", b"close"))
                message = {**message, "headers": [*message.get("headers", []), *extra]}
            await send(message)

        try:
            await self.app(scope, replay, send_wrapped)
        except Exception as exc:  # logged once, here
            log.error("unexpected error (request %s) on %s %s: %s\n%s", request_id, method,
                      _printable(path), type(exc).__name__, format_exception(exc))
            if started:
                return  # the answer is under way; the server closes the connection
            if page:
                await reply(500, error_body(
                    "internal_error",
                    "The service hit an unexpected error while making this page. Try again "
                    "in a moment; if it persists, report the request id below."), close=True)
                return
            await reply(500, error_body(
                "internal_error",
                f"The service hit an unexpected error (request id {request_id}). If this was "
                "a write, read the resource (or retry with the same Idempotency-Key) to learn "
                "whether it was stored; report the request id if it persists.",
                [{"location": ["request"], "message": "internal error",
                  "request_id": request_id}]), close=True)
