"""Running the service under uvicorn, with the timeouts uvicorn lacks.

uvicorn closes a keep-alive connection that stays idle (``timeout_keep_alive``), but
a client that sends part of its headers and then nothing (or a byte now and then,
which resets that timer) keeps its connection, and a worker's file descriptor, for
as long as it likes. :class:`GuardedH11Protocol` gives every request's headers
``header_timeout_s`` from the moment the connection is ready for them (opened, or
the previous answer sent); past that the connection is closed. The body has
``body_timeout_s`` once the headers are in (the guard middleware answers 408).
"""

from __future__ import annotations

import asyncio
import functools
import os
from typing import Any

from uvicorn.protocols.http.h11_impl import H11Protocol

from service import logs
from service.config import Settings


@functools.lru_cache(maxsize=1)
def _header_timeout_s() -> float:
    return Settings.from_env().header_timeout_s


class GuardedH11Protocol(H11Protocol):
    """uvicorn's h11 protocol with a deadline for each request's headers."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._header_timer: asyncio.TimerHandle | None = None

    def _arm_header_timer(self) -> None:
        if self._header_timer is not None:
            self._header_timer.cancel()
        armed_for = self.cycle
        self._header_timer = self.loop.call_later(
            _header_timeout_s(), self._headers_too_slow, armed_for)

    def _headers_too_slow(self, armed_for: Any) -> None:
        self._header_timer = None
        if self.transport is None or self.transport.is_closing():
            return
        waiting = self.cycle is None or self.cycle.response_complete
        if self.cycle is armed_for and waiting:
            self.logger.info("closing a connection whose request headers did not arrive "
                             "within %.3g s", _header_timeout_s())
            self.transport.close()

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._arm_header_timer()

    def on_response_complete(self) -> None:
        super().on_response_complete()
        if not self.transport.is_closing():
            self._arm_header_timer()

    def connection_lost(self, exc: Exception | None) -> None:
        if self._header_timer is not None:
            self._header_timer.cancel()
            self._header_timer = None
        super().connection_lost(exc)


def run(settings: Settings) -> None:
    """Serve until interrupted: one process, or ``settings.workers`` worker processes
    that each build the app from the environment (set here from ``settings``)."""
    import uvicorn

    os.environ.update(settings.to_env())
    _header_timeout_s.cache_clear()
    common: dict[str, Any] = dict(
        host=settings.host, port=settings.port, http=GuardedH11Protocol,
        timeout_keep_alive=settings.keep_alive_s, log_config=logs.config(settings.log_level),
        log_level=settings.log_level, access_log=False, server_header=False,
    )
    if settings.workers == 1:
        from service.api.app import create_app

        logs.configure(settings.log_level)
        uvicorn.run(create_app(settings=settings), **common)
    else:
        uvicorn.run("service.api:create_app", factory=True, workers=settings.workers, **common)
