"""Fixtures for the service tests: databases (SQLite file, PostgreSQL schema) and
a real uvicorn server on a loopback port.

PostgreSQL: the server at 127.0.0.1:5432 (trust auth, user postgres or root,
database ``test``; or ``SEQTEST_TEST_POSTGRES_URL``). Each test gets its own
uniquely named schema, dropped afterwards. When the server cannot be reached
the PostgreSQL tests are skipped, except in CI (``CI=true``), where they fail.
"""

from __future__ import annotations

import os
import re
import secrets
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

from service.storage import Storage

REPO = Path(__file__).resolve().parents[2]
IN_CI = os.environ.get("CI", "").strip().lower() == "true"
PG_CANDIDATES = (
    [os.environ["SEQTEST_TEST_POSTGRES_URL"]]
    if os.environ.get("SEQTEST_TEST_POSTGRES_URL")
    else [
        "postgresql://postgres@127.0.0.1:5432/test",
        "postgresql://root@127.0.0.1:5432/test",
    ]
)


def _libpq(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://", 1)


@pytest.fixture(scope="session")
def postgres_base() -> str:
    """A reachable PostgreSQL URL (no schema chosen yet)."""
    import psycopg

    problems = []
    for url in PG_CANDIDATES:
        try:
            with psycopg.connect(_libpq(url), connect_timeout=3) as conn:
                conn.execute("SELECT 1")
            return url
        except psycopg.Error as exc:
            problems.append(f"{url}: {str(exc).strip().splitlines()[0]}")
    message = "PostgreSQL is not reachable: " + "; ".join(problems)
    if IN_CI:
        pytest.fail(message + " (CI=true: the PostgreSQL tests must run in CI)")
    pytest.skip(message)


@pytest.fixture
def postgres_url(postgres_base: str) -> Iterator[str]:
    """A URL whose search_path is a fresh schema, dropped after the test."""
    import psycopg

    schema = f"seqtest_test_{os.getpid()}_{secrets.token_hex(4)}"
    with psycopg.connect(_libpq(postgres_base), autocommit=True) as conn:
        conn.execute(f'CREATE SCHEMA "{schema}"')
    sep = "&" if "?" in postgres_base else "?"
    try:
        yield f"{postgres_base}{sep}options=-csearch_path%3D{schema}"
    finally:
        with psycopg.connect(_libpq(postgres_base), autocommit=True) as conn:
            # end any session a killed server left behind before dropping
            conn.execute(
                "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                "WHERE pid <> pg_backend_pid() AND query ILIKE %s",
                (f"%{schema}%",),
            )
            conn.execute(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE')


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'seqtest.db'}"


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def database_url(request: pytest.FixtureRequest) -> str:
    """Each test using this runs once on SQLite and once on PostgreSQL."""
    if request.param == "sqlite":
        return request.getfixturevalue("sqlite_url")
    return request.getfixturevalue("postgres_url")


@pytest.fixture
def storage(database_url: str) -> Iterator[Storage]:
    s = Storage(database_url)
    try:
        yield s
    finally:
        s.close()


# --------------------------------------------------------------------- a real server

_RUNNING = re.compile(r"Uvicorn running on http://127\.0\.0\.1:(\d+)")


class Server:
    """``python -m service serve`` on 127.0.0.1, on a port the OS picks."""

    def __init__(self, database_url: str, log_path: Path, workers: int = 1) -> None:
        self.database_url = database_url
        self.log_path = log_path
        self.workers = workers
        self.proc: subprocess.Popen | None = None
        self.base_url = ""
        self.starts = 0

    def start(self, timeout: float = 30.0) -> Server:
        env = dict(os.environ)
        env["PYTHONPATH"] = str(REPO) + os.pathsep + env.get("PYTHONPATH", "")
        self.starts += 1
        log_path = self.log_path.with_suffix(f".{self.starts}.log")
        with open(log_path, "w") as log:
            self.proc = subprocess.Popen(
                [
                    sys.executable, "-m", "service", "serve",
                    "--host", "127.0.0.1", "--port", "0",
                    "--workers", str(self.workers),
                    "--database-url", self.database_url,
                    "--log-level", "info",
                ],
                cwd=REPO,
                env=env,
                stdout=log,
                stderr=subprocess.STDOUT,
                start_new_session=True,
            )
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited:\n{log_path.read_text()}")
            found = _RUNNING.findall(log_path.read_text())
            if found:
                self.base_url = f"http://127.0.0.1:{found[-1]}"
                try:
                    if httpx.get(self.base_url + "/v1/health", timeout=5).status_code == 200:
                        return self
                except httpx.TransportError:
                    pass
            time.sleep(0.05)
        self.stop()
        raise RuntimeError(f"server did not start in {timeout} s:\n{log_path.read_text()}")

    def kill9(self) -> None:
        """SIGKILL the whole process group: no clean shutdown of anything."""
        assert self.proc is not None
        os.killpg(self.proc.pid, signal.SIGKILL)
        self.proc.wait(timeout=10)
        self.proc = None

    def stop(self) -> None:
        if self.proc is None:
            return
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout=10)
        self.proc = None


@pytest.fixture
def server(database_url: str, tmp_path: Path) -> Iterator[Server]:
    srv = Server(database_url, tmp_path / "server.log").start()
    try:
        yield srv
    finally:
        srv.stop()


def new_key(database_url: str, team: str, label: str = "tests") -> str:
    s = Storage(database_url)
    try:
        return s.create_key(team, label)[1]
    finally:
        s.close()


def auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}
