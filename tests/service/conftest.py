"""Fixtures for the service tests: databases (SQLite file, PostgreSQL schema) and
a real uvicorn server on a loopback port.

PostgreSQL: the server at 127.0.0.1:5432 (trust auth, user postgres or root,
database ``test``; or ``SEQTEST_TEST_POSTGRES_URL``). Each test gets its own
uniquely named schema, dropped afterwards. When the server cannot be reached
the PostgreSQL tests are skipped, except in CI (``CI=true``), where they fail.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from service_helpers import Server, _libpq, open_db, reachable_postgres

from service.db.engine import Database

IN_CI = os.environ.get("CI", "").strip().lower() == "true"
PG_CANDIDATES = (
    [os.environ["SEQTEST_TEST_POSTGRES_URL"]]
    if os.environ.get("SEQTEST_TEST_POSTGRES_URL")
    else [
        "postgresql://postgres@127.0.0.1:5432/test",
        "postgresql://root@127.0.0.1:5432/test",
    ]
)


@pytest.fixture(scope="session")
def postgres_base() -> str:
    """A reachable PostgreSQL URL (no schema chosen yet)."""
    return reachable_postgres(PG_CANDIDATES, in_ci=IN_CI)


@contextmanager
def _schema(base: str) -> Iterator[str]:
    """A URL whose search_path is a fresh, uniquely named schema, dropped afterwards."""
    import psycopg

    schema = f"seqtest_test_{os.getpid()}_{secrets.token_hex(4)}"
    with psycopg.connect(_libpq(base), autocommit=True) as conn:
        conn.execute(f'CREATE SCHEMA "{schema}"')
    sep = "&" if "?" in base else "?"
    try:
        yield f"{base}{sep}options=-csearch_path%3D{schema}"
    finally:
        with psycopg.connect(_libpq(base), autocommit=True) as conn:
            conn.execute(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE')


@pytest.fixture
def postgres_url(postgres_base: str) -> Iterator[str]:
    with _schema(postgres_base) as url:
        yield url


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'seqtest.db'}"


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def database_url(request: pytest.FixtureRequest) -> str:
    """Each test using this runs once on SQLite and once on PostgreSQL."""
    if request.param == "sqlite":
        return request.getfixturevalue("sqlite_url")
    return request.getfixturevalue("postgres_url")


@pytest.fixture(
    scope="module",
    params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)],
)
def module_database_url(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[str]:
    """One database per test module and kind, shared by the module's tests."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path_factory.mktemp('db') / 'seqtest.db'}"
        return
    with _schema(request.getfixturevalue("postgres_base")) as url:
        yield url


@pytest.fixture
def storage(database_url: str) -> Iterator[Database]:
    s = open_db(database_url)
    try:
        yield s
    finally:
        s.close()


@pytest.fixture(scope="module")
def server(
    module_database_url: str, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Server]:
    """A server shared by a module's tests (they use their own teams and experiments)."""
    srv = Server(module_database_url, tmp_path_factory.mktemp("log") / "server.log").start()
    try:
        yield srv
    finally:
        srv.stop()
