"""The service's commands: ``serve`` and ``keys``, as registered by add_subcommands."""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

import httpx
import pytest
from service_helpers import REPO

from service import cli as commands


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="seqtest")
    commands.register(p.add_subparsers(dest="command", required=True))
    return p


def test_subcommands_are_registered_with_handlers():
    p = parser()
    serve = p.parse_args(["serve", "--host", "127.0.0.1", "--port", "9000", "--workers", "2",
                          "--database-url", "sqlite:///x.db"])
    assert serve.func is commands.run_serve
    assert (serve.host, serve.port, serve.workers, serve.database_url) == (
        "127.0.0.1", 9000, 2, "sqlite:///x.db")
    assert p.parse_args(["keys", "create", "--team", "t"]).func is commands.run_keys_create
    assert p.parse_args(["keys", "revoke", "key_1"]).func is commands.run_keys_revoke
    assert p.parse_args(["keys", "list"]).func is commands.run_keys_list
    with pytest.raises(SystemExit):
        p.parse_args(["keys"])  # an action is required


@pytest.mark.parametrize(
    "argv, env, words",
    [
        (["serve", "--port", "70000"], {}, "port"),
        (["serve", "--workers", "0"], {}, "workers"),
        (["serve"], {"SEQTEST_DATABASE_URL": "mysql://x/y"}, "SQLite"),
        (["serve", "--port", "1"], {"SEQTEST_WORKERS": "0"}, "workers"),
    ],
)
def test_serve_refuses_bad_settings(monkeypatch, capsys, argv, env, words):
    for k in ("SEQTEST_HOST", "SEQTEST_PORT", "SEQTEST_WORKERS", "SEQTEST_DATABASE_URL"):
        monkeypatch.delenv(k, raising=False)
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    args = parser().parse_args(argv)
    assert args.func(args) == 2
    assert words in capsys.readouterr().err


def test_keys_commands(sqlite_url: str, capsys):
    p = parser()

    def run(*argv: str) -> tuple[int, str, str]:
        args = p.parse_args([*argv, "--database-url", sqlite_url])
        code = args.func(args)
        out = capsys.readouterr()
        return code, out.out, out.err

    code, out, _ = run("keys", "create", "--team", "juniper-bakery", "--label", "nightly",
                       "--json")
    made = json.loads(out)
    assert code == 0 and made["key"].startswith("sqt_") and made["team"] == "juniper-bakery"
    code, out, _ = run("keys", "create", "--team", "juniper-bakery")
    assert code == 0 and "shown only now" in out
    code, out, _ = run("keys", "list", "--json")
    listed = json.loads(out)
    assert len(listed) == 2 and all(k["revoked_at"] is None for k in listed)
    assert made["key"] not in out
    code, out, _ = run("keys", "revoke", made["id"])
    assert code == 0 and made["id"] in out
    code, out, _ = run("keys", "list")
    assert "revoked" in out and "active" in out
    code, _, err = run("keys", "revoke", "key_unknown")
    assert code == 1 and "no key" in err
    code, _, err = run("keys", "create", "--team", "  ")
    assert code == 2 and "team name" in err


def test_serve_reads_its_settings_from_the_environment(tmp_path):
    """SEQTEST_HOST, SEQTEST_PORT (0: any free port), SEQTEST_DATABASE_URL."""
    db = tmp_path / "env.db"
    log = tmp_path / "serve.log"
    env = dict(os.environ, PYTHONPATH=str(REPO), SEQTEST_HOST="127.0.0.1", SEQTEST_PORT="0",
               SEQTEST_DATABASE_URL=f"sqlite:///{db}", SEQTEST_WORKERS="1")
    with open(log, "w") as out:
        proc = subprocess.Popen([sys.executable, "-m", "service", "serve"], cwd=REPO, env=env,
                                stdout=out, stderr=subprocess.STDOUT)
    try:
        deadline = time.monotonic() + 30
        base = None
        while time.monotonic() < deadline and base is None:
            assert proc.poll() is None, log.read_text()
            for line in log.read_text().splitlines():
                if "Uvicorn running on http://127.0.0.1:" in line:
                    base = line.split("running on ")[1].split()[0]
            time.sleep(0.05)
        assert base, log.read_text()
        health = httpx.get(base + "/v1/health", timeout=10).json()
        assert health["database"] == "sqlite" and db.exists()
    finally:
        proc.terminate()
        proc.wait(timeout=20)
