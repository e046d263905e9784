"""One logging configuration for the service and its server: timestamps, levels, ids.

Every line reads ``2024-05-01T12:00:00.123Z INFO seqtest.access [request-id] ...``.
The request id comes from a context variable set per request by the guard
middleware (``-`` outside a request). Tracebacks of database errors leave out the
errors' texts, which could carry a statement's values.
"""

from __future__ import annotations

import contextvars
import logging
import logging.config
import time
import traceback
from typing import Any

request_id_var: contextvars.ContextVar[str] = contextvars.ContextVar("seqtest_request_id",
                                                                     default="-")

FORMAT = "%(asctime)s %(levelname)s %(name)s [%(request_id)s] %(message)s"


class RequestIdFilter(logging.Filter):
    """Adds ``request_id`` to every record."""

    def filter(self, record: logging.LogRecord) -> bool:
        if not hasattr(record, "request_id"):
            record.request_id = request_id_var.get()
        return True


class UTCFormatter(logging.Formatter):
    """ISO 8601 timestamps in UTC with milliseconds."""

    def formatTime(self, record: logging.LogRecord, datefmt: str | None = None) -> str:
        t = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
        return f"{t}.{int(record.msecs):03d}Z"

    def formatException(self, ei: Any) -> str:
        return format_exception(ei[1]) if ei and ei[1] is not None else ""


def _private(exc: BaseException) -> bool:
    mod = type(exc).__module__ or ""
    return mod.startswith(("sqlalchemy", "psycopg", "sqlite3", "_sqlite3"))


def format_exception(exc: BaseException) -> str:
    """The traceback of ``exc`` and its causes; database errors by class name only."""
    parts: list[str] = []
    seen: set[int] = set()
    e: BaseException | None = exc
    chain = []
    while e is not None and id(e) not in seen:
        seen.add(id(e))
        chain.append(e)
        e = e.__cause__ or e.__context__
    for e in reversed(chain):
        frames = "".join(traceback.format_tb(e.__traceback__))
        head = f"{type(e).__module__}.{type(e).__qualname__}"
        text = head if _private(e) else f"{head}: {e}"
        parts.append(f"Traceback (most recent call last):\n{frames}{text}")
    return "\nDuring handling, or caused by, the above:\n".join(parts)


def config(level: str = "info") -> dict[str, Any]:
    """The ``logging.config`` dictionary for the service and uvicorn's loggers."""
    lvl = level.upper()
    handler = {"class": "logging.StreamHandler", "formatter": "plain",
               "filters": ["request_id"], "stream": "ext://sys.stderr"}
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "filters": {"request_id": {"()": RequestIdFilter}},
        "formatters": {"plain": {"()": UTCFormatter, "format": FORMAT}},
        "handlers": {"default": handler},
        "loggers": {
            "seqtest": {"handlers": ["default"], "level": lvl, "propagate": False},
            "uvicorn": {"handlers": ["default"], "level": lvl, "propagate": False},
            "uvicorn.error": {"level": lvl},
            # requests are logged by seqtest.access (with the team); not twice
            "uvicorn.access": {"handlers": [], "level": "CRITICAL", "propagate": False},
            "sqlalchemy": {"handlers": ["default"], "level": "WARNING", "propagate": False},
        },
    }


def configure(level: str = "info") -> None:
    logging.config.dictConfig(config(level))
