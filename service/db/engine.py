"""The database connection: engine settings per database, transactions, timeouts, failures.

One :class:`Database` serves SQLite (default) and PostgreSQL through SQLAlchemy Core.

- SQLite runs in WAL mode; every write transaction starts with ``BEGIN IMMEDIATE``
  (it holds the write lock from its first read); ``busy_timeout`` bounds the wait
  for another writer; ``synchronous`` is FULL by default.
- PostgreSQL: ``connect_timeout`` bounds opening a connection (the same bounds the
  wait for a free pooled one), ``statement_timeout`` and ``lock_timeout`` are set on
  every connection, and a watchdog closes the socket of a transaction that is still
  waiting for the server past its deadline: a server that accepts connections but
  never answers costs each request at most ``statement_timeout + 1`` seconds, then
  a 503.
- Storage failures (database busy, read-only, disk full, unreachable, silent)
  become :class:`service.errors.Unavailable` (503 with ``Retry-After``) whose message
  says whether anything was stored: a write that failed before its commit stored
  nothing; one whose commit was cut off on PostgreSQL has an unknown outcome, and
  the message says how to find out.
- Parameters are never part of an error text or a log line (``hide_parameters``).
"""

from __future__ import annotations

import heapq
import itertools
import math
import os
import socket
import sqlite3
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, Engine, create_engine, event, text
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DBAPIError, SQLAlchemyError
from sqlalchemy.exc import TimeoutError as PoolTimeout

from service.config import DEFAULT_DATABASE_URL, Settings
from service.db import migrations
from service.errors import Unavailable

ENV_DATABASE_URL = "SEQTEST_DATABASE_URL"


def resolve_database_url(url: str | None = None) -> str:
    """The SQLAlchemy URL to use.

    ``None`` reads ``SEQTEST_DATABASE_URL`` and falls back to ``./seqtest.db``.
    A bare path means an SQLite file. ``postgresql://`` and ``postgres://``
    select the psycopg 3 driver.
    """
    if url is None or url == "":
        url = os.environ.get(ENV_DATABASE_URL) or DEFAULT_DATABASE_URL
    if "://" not in url:
        url = "sqlite:///" + str(Path(url).expanduser())
    for prefix in ("postgresql://", "postgres://"):
        if url.startswith(prefix):
            url = "postgresql+psycopg://" + url[len(prefix) :]
    parsed = make_url(url)
    backend = parsed.get_backend_name()
    if backend == "sqlite":
        if not parsed.database or parsed.database == ":memory:" or "mode=memory" in url:
            raise ValueError(
                f"database URL {url!r}: an in-memory SQLite database cannot be shared between "
                "connections; give a file, e.g. sqlite:///./seqtest.db"
            )
        parent = Path(parsed.database).expanduser().resolve().parent
        if not parent.is_dir():
            raise ValueError(
                f"database URL {url!r}: the directory {str(parent)!r} does not exist"
            )
    elif backend == "postgresql":
        if parsed.get_driver_name() != "psycopg":
            raise ValueError(
                f"database URL {url!r}: use postgresql:// (the psycopg 3 driver is installed)"
            )
    else:
        raise ValueError(
            f"database URL {url!r}: the service stores data in SQLite (sqlite:///path/file.db "
            "or a file path) or PostgreSQL (postgresql://user@host/db)"
        )
    return url


def make_engine(url: str, settings: Settings) -> Engine:
    """The engine for ``url`` with the per-database settings the service needs."""
    if url.startswith("sqlite"):
        engine = create_engine(
            url,
            connect_args={"check_same_thread": False, "timeout": settings.busy_timeout_s},
            pool_size=8,
            max_overflow=32,
            pool_timeout=settings.connect_timeout_s,
            hide_parameters=True,
        )
        synchronous = settings.sqlite_synchronous
        busy_ms = int(settings.busy_timeout_s * 1000)

        @event.listens_for(engine, "connect")
        def _sqlite_connect(dbapi_conn: Any, _record: Any) -> None:
            # Take transaction control away from the sqlite3 module so that the
            # "begin" hook below decides between deferred and IMMEDIATE.
            dbapi_conn.isolation_level = None
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            # FULL (default): a commit is on disk (fsync of the WAL) before the
            # client hears about it, so an acknowledged look survives a crash of
            # the machine. NORMAL: survives a crash of the process (kill -9), but
            # the last commits may be lost if the machine loses power.
            cur.execute(f"PRAGMA synchronous={synchronous}")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute(f"PRAGMA busy_timeout={busy_ms}")
            cur.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn: Connection) -> None:
            # On the driver's connection: a statement through SQLAlchemy costs about
            # 0.1 ms of CPU, a fifth of a short transaction. Its errors are wrapped as
            # SQLAlchemy would (``DBAPIError``), for :func:`classify`.
            statement = ("BEGIN IMMEDIATE" if conn.get_execution_options().get("seqtest_write")
                         else "BEGIN")
            try:
                conn.connection.driver_connection.execute(statement)  # type: ignore[union-attr]
            except sqlite3.Error as exc:
                raise DBAPIError.instance(statement, None, exc, sqlite3.Error,
                                          hide_parameters=True) from exc

        return engine

    engine = create_engine(
        url,
        connect_args={"connect_timeout": max(2, math.ceil(settings.connect_timeout_s))},
        pool_size=10,
        max_overflow=30,
        pool_timeout=settings.connect_timeout_s,
        pool_pre_ping=False,  # pinged in Database._connect, under the watchdog
        hide_parameters=True,
    )
    statement_ms = int(settings.statement_timeout_s * 1000)
    lock_ms = int(settings.busy_timeout_s * 1000)

    @event.listens_for(engine, "connect")
    def _pg_connect(dbapi_conn: Any, _record: Any) -> None:
        with dbapi_conn.cursor() as cur:
            cur.execute(f"SET statement_timeout = {statement_ms}")
            cur.execute(f"SET lock_timeout = {lock_ms}")
            cur.execute(f"SET idle_in_transaction_session_timeout = {statement_ms + 1000}")
        dbapi_conn.commit()

    return engine


# --------------------------------------------------------------------- the watchdog


class _Watchdog:
    """Closes the socket of a PostgreSQL connection still busy past its deadline.

    A blocked driver call on that socket then fails at once (the connection is
    discarded), so a silent server cannot hold a request longer than its deadline.
    One daemon thread per process, sleeping until the next deadline.
    """

    def __init__(self) -> None:
        self._heap: list[tuple[float, int]] = []
        self._live: dict[int, int] = {}  # token -> socket fd
        self._fired: set[int] = set()
        self._cond = threading.Condition()
        self._ids = itertools.count(1)
        self._thread: threading.Thread | None = None

    def watch(self, fd: int, seconds: float) -> int:
        token = next(self._ids)
        with self._cond:
            self._live[token] = fd
            heapq.heappush(self._heap, (time.monotonic() + seconds, token))
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="seqtest-db-watchdog",
                                                daemon=True)
                self._thread.start()
            self._cond.notify()
        return token

    def release(self, token: int) -> bool:
        """Stop watching; True when the deadline had already fired."""
        with self._cond:
            self._live.pop(token, None)
            fired = token in self._fired
            self._fired.discard(token)
            return fired

    def _run(self) -> None:
        with self._cond:
            while True:
                now = time.monotonic()
                while self._heap and (self._heap[0][1] not in self._live
                                      or self._heap[0][0] <= now):
                    _, token = heapq.heappop(self._heap)
                    fd = self._live.pop(token, None)
                    if fd is not None:
                        self._fired.add(token)
                        _shutdown(fd)
                wait = (self._heap[0][0] - now) if self._heap else 60.0
                self._cond.wait(timeout=max(0.01, wait))


def _shutdown(fd: int) -> None:
    try:
        s = socket.socket(fileno=os.dup(fd))
    except OSError:
        return
    try:
        s.shutdown(socket.SHUT_RDWR)
    except OSError:
        pass
    finally:
        s.close()


_WATCHDOG = _Watchdog()


# --------------------------------------------------------------------- failures


@dataclass(frozen=True)
class Failure:
    """A storage failure, classified: what to tell the client."""

    reason: str  # busy, read_only, full, unreachable, no_answer, io
    message: str


_PG_CLASSES = {
    "LockNotAvailable": "busy",
    "DeadlockDetected": "busy",
    "SerializationFailure": "busy",
    "QueryCanceled": "no_answer",
    "ReadOnlySqlTransaction": "read_only",
    "DiskFull": "full",
    "InsufficientResources": "full",
    "OutOfMemory": "full",
    "ConnectionTimeout": "unreachable",
    "AdminShutdown": "unreachable",
    "CannotConnectNow": "unreachable",
    "TooManyConnections": "busy",
}


def classify(exc: BaseException, dialect: str, timed_out: bool = False) -> str | None:
    """The kind of storage failure behind ``exc``, or None when it is not one."""
    if timed_out:
        return "no_answer"
    if isinstance(exc, PoolTimeout):
        return "busy"
    if not isinstance(exc, DBAPIError):
        return None
    orig = exc.orig
    name = type(orig).__name__
    text_ = str(orig).lower()
    if dialect == "sqlite":
        if "locked" in text_ or "busy" in text_:
            return "busy"
        if "readonly" in text_ or "read-only" in text_:
            return "read_only"
        if "full" in text_:
            return "full"
        if "disk i/o" in text_ or "unable to open" in text_:
            return "io"
        return None
    if name in _PG_CLASSES:
        return _PG_CLASSES[name]
    if exc.connection_invalidated or name in ("OperationalError", "InterfaceError"):
        return "unreachable"
    return None


_WHAT = {
    "busy": "stayed busy with other writes",
    "read_only": "refuses writes (it is read-only)",
    "full": "has no space left to write",
    "unreachable": "cannot be reached",
    "no_answer": "did not answer in time",
    "io": "reported a disk error",
}
_RETRY_AFTER = {"busy": 1, "read_only": 60, "full": 60, "unreachable": 5, "no_answer": 10,
                "io": 30}


# --------------------------------------------------------------------- the database


class Database:
    """An engine with the service's transactions: :meth:`read`, :meth:`write`."""

    def __init__(self, settings: Settings | None = None, *, url: str | None = None,
                 migrate: bool = True) -> None:
        self.settings = settings or Settings.from_env()
        self.url = resolve_database_url(url if url is not None else self.settings.database_url)
        self.engine = make_engine(self.url, self.settings)
        self.dialect = self.engine.dialect.name
        # (monotonic time, reason) of the last write that failed for storage reasons,
        # cleared by the next write that commits; reported by the health route
        self.last_write_failure: tuple[float, str] | None = None
        self._probed_at = -1e9
        self._probe_reason: str | None = None
        # SQLite: this process's writers queue on a lock of their own before BEGIN
        # IMMEDIATE, so the database's lock only arbitrates between processes. A writer
        # waiting on the database's lock is woken by SQLite's busy handler, which polls
        # with sleeps growing to 100 ms: under load, writers of one process queueing
        # there wait far longer than the writes themselves take.
        self._writers = threading.Lock() if self.dialect == "sqlite" else None
        self.schema_version = self._migrate() if migrate else 0

    def close(self) -> None:
        self.engine.dispose()

    def _migrate(self) -> int:
        with self._guard(writing=True):
            return migrations.migrate(self.engine)

    # -- transactions ------------------------------------------------------------

    @property
    def _deadline_s(self) -> float:
        return self.settings.statement_timeout_s + 1.0

    @contextmanager
    def _guard(self, *, writing: bool, state: dict[str, Any] | None = None
               ) -> Iterator[dict[str, Any]]:
        """Turn storage failures inside into :class:`Unavailable`."""
        st: dict[str, Any] = state if state is not None else {}
        st.setdefault("phase", "work")
        st.setdefault("timed_out", False)
        try:
            yield st
        except (DBAPIError, PoolTimeout) as exc:
            reason = classify(exc, self.dialect, st["timed_out"])
            if reason is None:
                raise
            raise self._unavailable(reason, writing, st["phase"]) from exc
        if writing:
            self.last_write_failure = None

    def _unavailable(self, reason: str, writing: bool, phase: str) -> Unavailable:
        if writing:
            self.last_write_failure = (time.monotonic(), reason)
        what = f"The {self.dialect} database {_WHAT[reason]}"
        if reason == "busy":
            what += f" for {self.settings.busy_timeout_s:g} s"
        elif reason == "no_answer":
            what += f" (within {self._deadline_s:g} s)"
        if not writing:
            outcome = "Retry later."
        elif phase == "commit" and self.dialect == "postgresql" and reason in (
            "unreachable", "no_answer"
        ):
            outcome = ("The connection was lost while committing, so whether this write was "
                       "stored is unknown: read the resource, or retry with the same "
                       "Idempotency-Key, which answers with the first outcome if it was stored.")
        else:
            outcome = "Nothing was stored by this request; retry it later."
        return Unavailable(f"{what}. {outcome}", retry_after=_RETRY_AFTER[reason],
                           details=[{"location": ["database"], "message": reason}])

    @contextmanager
    def _connect(self, st: dict[str, Any], **options: Any) -> Iterator[Connection]:
        token = None
        conn = self.engine.connect()
        try:
            if options:
                conn = conn.execution_options(**options)
            if self.dialect == "postgresql":
                fd = conn.connection.dbapi_connection.pgconn.socket  # type: ignore[union-attr]
                token = _WATCHDOG.watch(fd, self._deadline_s)
                conn.exec_driver_sql("SELECT 1")  # the ping, under the watchdog
                conn.rollback()
            yield conn
        finally:
            if token is not None and _WATCHDOG.release(token):
                st["timed_out"] = True
                conn.invalidate()
            try:
                conn.close()
            except SQLAlchemyError:
                pass

    @contextmanager
    def read(self) -> Iterator[Connection]:
        """A read-only transaction (one snapshot on PostgreSQL)."""
        with self._guard(writing=False) as st:
            opts = {"isolation_level": "REPEATABLE READ"} if self.dialect == "postgresql" else {}
            with self._connect(st, **opts) as conn, conn.begin():
                yield conn

    @contextmanager
    def _writer_turn(self, wait_s: float | None = None, writing: bool = True
                     ) -> Iterator[None]:
        """SQLite: wait (at most ``wait_s``, by default the busy timeout) for this
        process's other writers."""
        if self._writers is None:
            yield
            return
        wait = self.settings.busy_timeout_s if wait_s is None else wait_s
        if not self._writers.acquire(timeout=wait):
            raise self._unavailable("busy", writing, "work")
        try:
            yield
        finally:
            self._writers.release()

    @contextmanager
    def write(self) -> Iterator[Connection]:
        """One write transaction; committed when the block ends without an error.

        SQLite: ``BEGIN IMMEDIATE`` (the write lock from the first statement), after
        this process's other writers (:meth:`_writer_turn`).
        """
        with self._writer_turn(), self._guard(writing=True) as st, \
                self._connect(st, seqtest_write=True) as conn:
            trans = conn.begin()
            try:
                yield conn
            except BaseException:
                if trans.is_active:
                    try:
                        trans.rollback()
                    except SQLAlchemyError:
                        pass
                raise
            st["phase"] = "commit"
            trans.commit()

    def ping(self) -> None:
        """One trivial query; :class:`Unavailable` when the database cannot be reached."""
        with self.read() as conn:
            conn.execute(text("SELECT 1"))

    def check_writable(self) -> str | None:
        """``None`` when a write can be made now, else the reason it cannot.

        Every call reads (``SELECT 1``). At most once a second per process it also
        writes: a transaction that inserts into ``health_checks`` and rolls back (on
        SQLite it takes the write lock, waiting at most a second, so a read-only file
        or a database held by a stuck writer is found). A disk that filled up is
        found by the last real write that failed, remembered until one succeeds.
        """
        now = time.monotonic()
        try:
            if now - self._probed_at >= 1.0:
                self._probed_at = now
                self._probe_reason = self._probe_write()
            else:
                self.ping()
        except Unavailable as exc:
            details = exc.details or [{}]
            return str(details[0].get("message", "unavailable"))
        if self._probe_reason is not None:
            return self._probe_reason
        if self.last_write_failure is not None:
            at, reason = self.last_write_failure
            if now - at < 300:
                return reason
        return None

    def _probe_write(self) -> str | None:
        try:
            # in this process's queue of writers, like any write (else, on SQLite, the
            # probe would poll for the database's lock between writers that hand it
            # to each other, and report a busy database under a steady load of writes)
            with self._writer_turn(1.0, writing=False), \
                    self._guard(writing=False) as st, \
                    self._connect(st, seqtest_write=True) as conn:
                raw: Any = conn.connection.dbapi_connection
                if self.dialect == "sqlite":  # outside any transaction, on the driver
                    raw.execute("PRAGMA busy_timeout=1000")
                try:
                    trans = conn.begin()
                    try:
                        conn.execute(text("INSERT INTO health_checks (checked_at) VALUES (:t)"),
                                     {"t": str(time.time())})
                    finally:
                        trans.rollback()
                finally:
                    if self.dialect == "sqlite":
                        busy_ms = int(self.settings.busy_timeout_s * 1000)
                        raw.execute(f"PRAGMA busy_timeout={busy_ms}")
        except Unavailable as exc:
            details = exc.details or [{}]
            return str(details[0].get("message", "unavailable"))
        return None
