"""Request body size limit, as plain ASGI middleware.

A body larger than the limit gets a JSON 413 before any of it reaches the
app: announced by Content-Length, or found while reading a chunked body.
"""

from __future__ import annotations

import json
from typing import Any

from service.errors import error_body

DEFAULT_MAX_BODY_BYTES = 64 * 1024


async def _send_json(send: Any, status: int, body: dict) -> None:
    payload = json.dumps(body).encode("utf-8")
    await send(
        {
            "type": "http.response.start",
            "status": status,
            "headers": [
                (b"content-type", b"application/json"),
                (b"content-length", str(len(payload)).encode("ascii")),
                (b"connection", b"close"),
            ],
        }
    )
    await send({"type": "http.response.body", "body": payload})


class BodySizeLimit:
    """Refuse request bodies above ``max_bytes`` with 413."""

    def __init__(self, app: Any, max_bytes: int = DEFAULT_MAX_BODY_BYTES) -> None:
        self.app = app
        self.max_bytes = int(max_bytes)

    def _too_large(self) -> dict:
        return error_body(
            "payload_too_large",
            f"The request body is larger than {self.max_bytes} bytes, the most this service "
            "accepts. Looks and plans are far smaller; check what is being sent.",
        )

    async def __call__(self, scope: dict, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        for name, value in scope.get("headers", ()):
            if name == b"content-length":
                try:
                    length = int(value)
                except ValueError:
                    length = -1
                if length < 0:
                    await _send_json(
                        send,
                        400,
                        error_body("bad_request", "The Content-Length header is not a number."),
                    )
                    return
                if length > self.max_bytes:
                    await _send_json(send, 413, self._too_large())
                    return
        chunks: list[bytes] = []
        size = 0
        while True:
            message = await receive()
            if message["type"] == "http.disconnect":
                return
            chunk = message.get("body", b"")
            size += len(chunk)
            if size > self.max_bytes:
                await _send_json(send, 413, self._too_large())
                return
            chunks.append(chunk)
            if not message.get("more_body", False):
                break
        body = b"".join(chunks)
        delivered = False

        async def replay() -> dict:
            nonlocal delivered
            if not delivered:
                delivered = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        await self.app(scope, replay, send)
