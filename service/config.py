"""Settings of the service, from the environment and command-line arguments, in one place.

Every setting has an environment variable and a documented default; the ``serve``
command's options override the environment. :func:`Settings.from_env` reads them
and checks each with a message that names the setting.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from typing import Any

DEFAULT_DATABASE_URL = "sqlite:///./seqtest.db"
SQLITE_SYNCHRONOUS = ("FULL", "NORMAL", "EXTRA")
LOG_LEVELS = ("critical", "error", "warning", "info", "debug")
MIN_SECRET_CHARS = 32


@dataclass(frozen=True)
class Setting:
    """One setting: its environment variable, default and allowed range."""

    name: str
    env: str
    default: Any
    kind: type
    low: float | None = None
    high: float | None = None
    help: str = ""


SETTINGS: tuple[Setting, ...] = (
    Setting("host", "SEQTEST_HOST", "127.0.0.1", str, help="address to bind"),
    Setting("port", "SEQTEST_PORT", 8000, int, 0, 65535, "port (0: any free port)"),
    Setting("workers", "SEQTEST_WORKERS", 1, int, 1, 64, "worker processes"),
    Setting("database_url", "SEQTEST_DATABASE_URL", DEFAULT_DATABASE_URL, str,
            help="sqlite:///file.db, a file path, or postgresql://user@host/db"),
    Setting("sqlite_synchronous", "SEQTEST_SQLITE_SYNCHRONOUS", "FULL", str,
            help="FULL (a commit is on disk before the answer), NORMAL or EXTRA"),
    Setting("busy_timeout_s", "SEQTEST_BUSY_TIMEOUT", 30.0, float, 0.1, 600,
            "seconds a write waits for another writer (SQLite lock, PostgreSQL row lock)"),
    Setting("connect_timeout_s", "SEQTEST_CONNECT_TIMEOUT", 5.0, float, 2, 600,
            "seconds to open a PostgreSQL connection (or wait for a free pooled one)"),
    Setting("statement_timeout_s", "SEQTEST_STATEMENT_TIMEOUT", 30.0, float, 0.5, 3600,
            "seconds a database transaction may take before it is abandoned with 503"),
    Setting("idempotency_ttl_s", "SEQTEST_IDEMPOTENCY_TTL", 7 * 86400.0, float, 60,
            366 * 86400, "seconds an Idempotency-Key is remembered (default 7 days)"),
    Setting("header_timeout_s", "SEQTEST_HEADER_TIMEOUT", 10.0, float, 0.1, 600,
            "seconds a client has to send a request's headers"),
    Setting("body_timeout_s", "SEQTEST_BODY_TIMEOUT", 30.0, float, 0.1, 3600,
            "seconds a client has to send a request's body once its headers are in"),
    Setting("keep_alive_s", "SEQTEST_KEEP_ALIVE", 5.0, float, 0.1, 600,
            "seconds an idle keep-alive connection stays open"),
    Setting("looks_at_once", "SEQTEST_LOOKS_AT_ONCE", 2, int, 1, 64,
            "looks one server process analyses and stores at once; the others wait their "
            "turn, first come first served"),
    Setting("max_body_bytes", "SEQTEST_MAX_BODY_BYTES", 64 * 1024, int, 1024, 16 * 2**20,
            "largest request body accepted (413 above)"),
    Setting("log_level", "SEQTEST_LOG_LEVEL", "info", str, help="critical ... debug"),
    Setting("access_log", "SEQTEST_ACCESS_LOG", True, bool, help="one line per request"),
    Setting("session_secret", "SEQTEST_SESSION_SECRET", "", str,
            help="key that signs the pages' session cookies (at least 32 characters); "
            "empty: generated once and kept in the database, shared by every process"),
    Setting("session_max_age_s", "SEQTEST_SESSION_MAX_AGE", 8 * 3600.0, float, 60,
            30 * 86400, "seconds a sign-in to the pages lasts (default 8 hours)"),
)
_BY_NAME = {s.name: s for s in SETTINGS}


def _parse(setting: Setting, raw: Any, source: str) -> Any:
    """One value, checked; ValueError in the project's message style."""
    label = f"{setting.name} ({source})" if source.startswith("SEQTEST_") else setting.name
    try:
        if setting.kind is bool:
            if isinstance(raw, bool):
                value: Any = raw
            elif str(raw).strip().lower() in ("1", "true", "yes", "on"):
                value = True
            elif str(raw).strip().lower() in ("0", "false", "no", "off"):
                value = False
            else:
                raise ValueError
        elif setting.kind is int:
            value = int(str(raw).strip()) if not isinstance(raw, int) else raw
        elif setting.kind is float:
            value = float(str(raw).strip()) if not isinstance(raw, (int, float)) else float(raw)
        else:
            value = str(raw).strip()
    except ValueError:
        what = {bool: "true or false", int: "a whole number", float: "a number"}.get(
            setting.kind, "text")
        raise ValueError(f"{label}: got {raw!r}; allowed is {what}") from None
    if setting.kind in (int, float):
        if not (value == value) or (setting.low is not None and value < setting.low) or (
            setting.high is not None and value > setting.high
        ):
            raise ValueError(
                f"{label}: got {raw!r}; allowed is {setting.low:g} to {setting.high:g}"
            )
    if setting.name == "sqlite_synchronous":
        value = value.upper()
        if value not in SQLITE_SYNCHRONOUS:
            raise ValueError(f"{label}: got {raw!r}; allowed are {', '.join(SQLITE_SYNCHRONOUS)}")
    if setting.name == "session_secret" and value and (
        len(value) < MIN_SECRET_CHARS or any(ord(c) < 33 or ord(c) > 126 for c in value)
    ):
        raise ValueError(f"{label}: got a value of {len(value)} characters; allowed is at "
                         f"least {MIN_SECRET_CHARS} visible ASCII characters (e.g. from "
                         "`python -c 'import secrets; print(secrets.token_urlsafe(48))'`), "
                         "or empty to keep a generated one in the database")
    if setting.name == "log_level":
        value = value.lower()
        if value not in LOG_LEVELS:
            raise ValueError(f"{label}: got {raw!r}; allowed are {', '.join(LOG_LEVELS)}")
    return value


@dataclass(frozen=True)
class Settings:
    """Everything configurable about the service (see :data:`SETTINGS`)."""

    host: str = "127.0.0.1"
    port: int = 8000
    workers: int = 1
    database_url: str = DEFAULT_DATABASE_URL
    sqlite_synchronous: str = "FULL"
    busy_timeout_s: float = 30.0
    connect_timeout_s: float = 5.0
    statement_timeout_s: float = 30.0
    idempotency_ttl_s: float = 7 * 86400.0
    header_timeout_s: float = 10.0
    body_timeout_s: float = 30.0
    keep_alive_s: float = 5.0
    looks_at_once: int = 2
    max_body_bytes: int = 64 * 1024
    log_level: str = "info"
    access_log: bool = True
    session_secret: str = field(default="", repr=False)  # never in a log line
    session_max_age_s: float = 8 * 3600.0

    @classmethod
    def from_env(
        cls, overrides: Mapping[str, Any] | None = None, env: Mapping[str, str] | None = None
    ) -> Settings:
        """Defaults, then the environment, then ``overrides`` (``None`` values skipped)."""
        env = os.environ if env is None else env
        values: dict[str, Any] = {}
        for s in SETTINGS:
            raw = env.get(s.env)
            if raw is not None and raw != "":
                values[s.name] = _parse(s, raw, s.env)
        for name, raw in (overrides or {}).items():
            if raw is None:
                continue
            if name not in _BY_NAME:
                raise ValueError(f"{name}: unknown setting; known are {', '.join(_BY_NAME)}")
            values[name] = _parse(_BY_NAME[name], raw, name)
        return cls(**values)

    def with_(self, **changes: Any) -> Settings:
        """A copy with some settings changed (each checked)."""
        checked = {k: _parse(_BY_NAME[k], v, k) for k, v in changes.items()}
        return replace(self, **checked)

    def to_env(self) -> dict[str, str]:
        """The settings as environment variables (for worker processes)."""
        out = {}
        for f in fields(self):
            s = _BY_NAME[f.name]
            v = getattr(self, f.name)
            out[s.env] = ("true" if v else "false") if isinstance(v, bool) else str(v)
        return out
