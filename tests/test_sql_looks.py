"""Looks from a database (seqtest.monitoring.sqllooks and ``seqtest analyze --sql``).

A table of DAILY per-arm counts of an invented shop (a free-shipping offer against the
current checkout, three weeks of traffic drawn with a fixed seed) is aggregated by the
query itself into CUMULATIVE weekly looks with window functions, in both layouts of
seqtest.monitoring.lookfile. The check: the analysis read from the database is the
analysis of the CSV file of the same numbers (cumulative sums computed here with numpy),
in Python and on the command line.

PostgreSQL: the server at 127.0.0.1:5432 (trust auth, database ``test``; or
``SEQTEST_TEST_POSTGRES_URL``); each test gets its own schema, dropped afterwards.
Unreachable, the PostgreSQL tests are skipped, except in CI (``CI=true``), where they
fail. SQLite: a file per test.
"""

from __future__ import annotations

import json
import os
import secrets
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import seqtest
from seqtest.cli import main
from seqtest.cli.demo import DEMO_PLAN
from seqtest.core.errors import InputError, LookDataError
from seqtest.monitoring.lookfile import read_looks_csv
from seqtest.monitoring.sqllooks import arm_looks_from_sql, frame_from_sql, looks_from_sql

IN_CI = os.environ.get("CI", "").strip().lower() == "true"
PG_CANDIDATES = ([os.environ["SEQTEST_TEST_POSTGRES_URL"]]
                 if os.environ.get("SEQTEST_TEST_POSTGRES_URL")
                 else ["postgresql://postgres@127.0.0.1:5432/test",
                       "postgresql://root@127.0.0.1:5432/test"])

ARMS = ("control", "free_shipping")
DAYS = 21                      # three weekly looks
START = pd.Timestamp("2026-03-02")


def _daily() -> pd.DataFrame:
    """Invented daily counts: visitors and buyers per arm and day (demo data)."""
    rng = np.random.default_rng(20260302)
    rows = []
    for day in range(1, DAYS + 1):
        for arm, rate in zip(ARMS, (0.080, 0.092), strict=True):
            visitors = int(rng.integers(150, 250))
            buyers = int(rng.binomial(visitors, rate))
            rows.append((day, (START + pd.Timedelta(days=day - 1)).date(), arm, visitors,
                         buyers))
    return pd.DataFrame(rows, columns=["day_number", "day", "arm", "visitors", "buyers"])


DAILY = _daily()


def _csv_of_the_same_numbers(tmp_path: Path) -> Path:
    """The weekly cumulative looks, summed here (numpy), as a wide CSV file."""
    cols = {}
    for arm in ARMS:
        d = DAILY[DAILY["arm"] == arm].sort_values("day_number")
        for src, total in (("visitors", "n"), ("buyers", "successes")):
            cumulative = np.cumsum(d[src].to_numpy())
            cols[f"{arm}_{total}"] = cumulative[6::7]          # days 7, 14, 21
    path = tmp_path / "looks.csv"
    pd.DataFrame(cols).to_csv(path, index=False)
    return path


# The queries: daily counts -> cumulative totals per arm (window functions) -> the rows
# of the days that end a week, numbered as looks. Integer division and % behave alike
# in PostgreSQL and SQLite.
CUMULATIVE = """
    WITH cumulative AS (
        SELECT day_number, day, arm,
               SUM(visitors) OVER (PARTITION BY arm ORDER BY day_number) AS visitors,
               SUM(buyers) OVER (PARTITION BY arm ORDER BY day_number) AS buyers
        FROM daily_counts
    )
"""
LONG_QUERY = CUMULATIVE + """
    SELECT day_number / 7 AS look, arm, visitors AS n, buyers AS successes
    FROM cumulative WHERE day_number % 7 = 0
"""
WIDE_QUERY = CUMULATIVE + """
    SELECT day_number / 7 AS look,
           MAX(CASE WHEN arm = 'control' THEN visitors END) AS control_n,
           MAX(CASE WHEN arm = 'control' THEN buyers END) AS control_successes,
           MAX(CASE WHEN arm = 'free_shipping' THEN visitors END) AS free_shipping_n,
           MAX(CASE WHEN arm = 'free_shipping' THEN buyers END) AS free_shipping_successes
    FROM cumulative WHERE day_number % 7 = 0
    GROUP BY day_number ORDER BY day_number
"""
# the team's own names, mapped; looks ordered by the date (no look column)
OWN_NAMES_QUERY = CUMULATIVE + """
    SELECT day AS week_ending, arm AS variant, visitors, buyers
    FROM cumulative WHERE day_number % 7 = 0
"""
OWN_NAMES = {"week_ending": "date", "variant": "arm", "visitors": "n", "buyers": "successes"}


# ------------------------------------------------------------------------- databases

def _libpq(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://", 1)


@pytest.fixture(scope="module")
def postgres_base() -> str:
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
    """A URL whose search_path is a fresh schema holding daily_counts, dropped after."""
    import psycopg
    schema = f"seqtest_looks_{os.getpid()}_{secrets.token_hex(4)}"
    with psycopg.connect(_libpq(postgres_base), autocommit=True) as conn:
        conn.execute(f'CREATE SCHEMA "{schema}"')
        conn.execute(f'CREATE TABLE "{schema}".daily_counts (day_number integer NOT NULL, '
                     "day date NOT NULL, arm text NOT NULL, visitors integer NOT NULL, "
                     # bigint: its SUM is numeric, read as Decimal
                     "buyers bigint NOT NULL)")
        with conn.cursor() as cur:
            cur.executemany(f'INSERT INTO "{schema}".daily_counts VALUES (%s, %s, %s, %s, %s)',
                            [tuple(r) for r in DAILY.itertuples(index=False)])
    sep = "&" if "?" in postgres_base else "?"
    try:
        yield f"{postgres_base}{sep}options=-csearch_path%3D{schema}"
    finally:
        with psycopg.connect(_libpq(postgres_base), autocommit=True) as conn:
            conn.execute(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE')


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    path = tmp_path / "shop.db"
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE daily_counts (day_number INTEGER, day TEXT, arm TEXT, "
                     "visitors INTEGER, buyers INTEGER)")
        conn.executemany("INSERT INTO daily_counts VALUES (?, ?, ?, ?, ?)",
                         [(r.day_number, str(r.day), r.arm, r.visitors, r.buyers)
                          for r in DAILY.itertuples(index=False)])
    conn.close()
    return f"sqlite:///{path}"


@pytest.fixture(params=[pytest.param("postgres", marks=pytest.mark.postgres), "sqlite"])
def database_url(request: pytest.FixtureRequest) -> str:
    return str(request.getfixturevalue(f"{request.param}_url"))


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


@pytest.fixture
def plan() -> seqtest.Plan:
    return seqtest.design(**DEMO_PLAN)


@pytest.fixture
def plan_file(tmp_path: Path, plan: seqtest.Plan) -> Path:
    p = tmp_path / "plan.json"
    p.write_text(json.dumps(plan.to_dict()))
    return p


# ------------------------------------------------------------ the same analysis as a CSV

@pytest.mark.parametrize("query, options", [
    (LONG_QUERY, {}),
    (WIDE_QUERY, {}),
    (OWN_NAMES_QUERY, {"columns": OWN_NAMES}),
], ids=["long", "wide", "own-names-by-date"])
def test_daily_counts_summed_by_the_query_give_the_csv_analysis(
        database_url, tmp_path, plan, query, options):
    csv_looks = read_looks_csv(_csv_of_the_same_numbers(tmp_path), "binary")
    sql_looks = looks_from_sql(query, database_url, "binary", **options)
    assert sql_looks == csv_looks
    # every total a plain int (PostgreSQL's SUM over bigint arrives as Decimal)
    assert all(type(v) is int for look in sql_looks for arm in look.values()
               for v in arm.values())
    from_sql = seqtest.analyze(plan, sql_looks).to_dict()
    from_csv = seqtest.analyze(plan, csv_looks).to_dict()
    assert from_sql == from_csv
    assert len(from_sql["looks"]) == DAYS // 7
    table = arm_looks_from_sql(query, database_url, "binary", **options)
    assert table.arms == ARMS


@pytest.mark.parametrize("query, extra", [
    (LONG_QUERY, []),
    (OWN_NAMES_QUERY, [f"--column={k}={v}" for k, v in OWN_NAMES.items()]),
], ids=["long", "own-names-by-date"])
def test_the_command_line_reads_looks_with_sql(database_url, tmp_path, plan_file, capsys,
                                               monkeypatch, query, extra):
    csv = _csv_of_the_same_numbers(tmp_path)
    rc, csv_json, _ = _run(["analyze", str(csv), "--plan", str(plan_file), "--json", "-"],
                           capsys)
    assert rc == 0
    rc, sql_json, err = _run(["analyze", "--sql", query, "--database-url", database_url,
                              "--plan", str(plan_file), "--json", "-", *extra], capsys)
    assert rc == 0, err
    assert json.loads(sql_json) == json.loads(csv_json)
    # the query from a file, the URL from the environment
    qfile = tmp_path / "looks.sql"
    qfile.write_text(query)
    monkeypatch.setenv("SEQTEST_LOOKS_DATABASE_URL", database_url)
    rc, sql_json2, err = _run(["analyze", "--sql-file", str(qfile), "--plan",
                               str(plan_file), "--json", "-", *extra], capsys)
    assert rc == 0, err
    assert json.loads(sql_json2) == json.loads(csv_json)


# ----------------------------------------------------------------------------- refusals

def test_a_failing_query_shows_the_database_message(database_url):
    with pytest.raises(InputError) as exc:
        frame_from_sql("SELECT look FROM no_such_table", database_url)
    msg = str(exc.value)
    assert msg.startswith("query: the database refused it: ")
    assert "no_such_table" in msg          # the database's own words name the table
    assert "\n" not in msg and "Background on this error" not in msg


@pytest.mark.postgres
def test_no_password_in_any_message(postgres_base):
    # trust authentication ignores the password, so the query runs and fails on its own
    secret = "s3cret-Pa55word"
    url = postgres_base.replace("://", f"://:{secret}@", 1) if "@" not in postgres_base \
        else postgres_base.replace("@", f":{secret}@", 1)
    with pytest.raises(InputError) as exc:
        frame_from_sql("SELECT * FROM no_such_table", url)
    assert secret not in str(exc.value)
    # a server that does not answer (port 1 on the loopback: nothing listens there)
    down = "postgresql://analyst:" + secret + "@127.0.0.1:1/test"
    with pytest.raises(InputError) as exc:
        frame_from_sql("SELECT 1", down)
    msg = str(exc.value)
    assert "could not connect" in msg and secret not in msg and "***" in msg


def test_no_rows_is_refused_naming_the_columns(database_url):
    with pytest.raises(InputError) as exc:
        frame_from_sql(LONG_QUERY.replace("% 7 = 0", "% 7 = 0 AND 1 = 0"), database_url)
    msg = str(exc.value)
    assert "returned no rows" in msg and "look, arm, n, successes" in msg


def test_wrong_columns_are_refused_naming_them(database_url):
    query = CUMULATIVE + "SELECT day_number AS look, arm, visitors, buyers FROM cumulative"
    with pytest.raises(LookDataError) as exc:
        looks_from_sql(query, database_url, "binary")
    msg = str(exc.value)
    assert "unknown columns visitors, buyers" in msg
    assert "look, arm, n, successes" in msg


def test_the_query_cannot_change_the_data(database_url):
    # the query runs read-only (PostgreSQL: a read-only transaction; SQLite: query_only)
    # and is rolled back
    with pytest.raises(InputError, match="the database refused it"):
        frame_from_sql("DELETE FROM daily_counts RETURNING day_number", database_url)
    left = frame_from_sql("SELECT COUNT(*) AS rows FROM daily_counts", database_url)
    assert int(left["rows"].iloc[0]) == len(DAILY)


def test_the_command_line_refuses_in_one_line(database_url, plan_file, capsys):
    rc, _, err = _run(["analyze", "--sql", "SELECT nothing FROM nowhere", "--database-url",
                       database_url, "--plan", str(plan_file)], capsys)
    assert rc == 2 and "Traceback" not in err
    assert err.startswith("seqtest analyze: error: query: the database refused it:")
    assert err.count("\n") == 1


def test_missing_or_doubled_sources_are_refused(tmp_path, plan_file, capsys):
    cases = [
        (["analyze", "--plan", str(plan_file)], "looks: got none"),
        (["analyze", "x.csv", "--sql", "SELECT 1", "--plan", str(plan_file)],
         "got a looks file and --sql"),
        (["analyze", "--sql", "SELECT 1", "--plan", str(plan_file)],
         "--database-url: missing"),
        (["analyze", "--sql-file", str(tmp_path / "none.sql"), "--database-url",
          "sqlite:///x.db", "--plan", str(plan_file)], "--sql-file: "),
    ]
    for argv, message in cases:
        rc, _, err = _run(argv, capsys)
        assert rc == 2 and message in err, (argv, err)


@pytest.mark.parametrize("url, message", [
    ("", "database URL: got ''"),
    ("nosuchdb://host/db", "install the database's driver"),
    ("sqlite://", "in-memory database is empty"),
    ("sqlite:///:memory:", "in-memory database is empty"),
])
def test_bad_urls_are_refused(url, message):
    with pytest.raises(InputError) as exc:
        frame_from_sql("SELECT 1", url)
    assert message in str(exc.value)


def test_a_missing_sqlite_file_is_not_created(tmp_path):
    path = tmp_path / "no.db"
    for url in (f"sqlite:///{path}", str(path)):
        with pytest.raises(InputError, match="does not exist"):
            frame_from_sql("SELECT 1", url)
    assert not path.exists()


def test_a_bare_path_is_an_sqlite_file(sqlite_url, tmp_path):
    path = sqlite_url[len("sqlite:///"):]
    frame = frame_from_sql("SELECT COUNT(*) AS n FROM daily_counts", path)
    assert int(frame["n"].iloc[0]) == len(DAILY)


def test_without_sqlalchemy_the_message_says_what_to_install(monkeypatch):
    import sys
    monkeypatch.setitem(sys.modules, "sqlalchemy", None)    # import sqlalchemy fails
    with pytest.raises(InputError, match=r"seqtest\[sql\]"):
        frame_from_sql("SELECT 1", "sqlite:///x.db")
