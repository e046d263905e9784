"""Small helpers shared by the service tests."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import httpx
from fastapi.testclient import TestClient

from service import usecases
from service.api import create_app
from service.config import Settings
from service.db.engine import Database

REPO = Path(__file__).resolve().parents[2]


def _libpq(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://", 1)


def reachable_postgres(candidates: list[str], *, in_ci: bool) -> str:
    """The first URL that answers; otherwise skip the test, or fail it in CI."""
    import psycopg
    import pytest

    problems = []
    for url in candidates:
        try:
            with psycopg.connect(_libpq(url), connect_timeout=3) as conn:
                conn.execute("SELECT 1")
            return url
        except psycopg.Error as exc:
            problems.append(f"{url}: {str(exc).strip().splitlines()[0]}")
    message = "PostgreSQL is not reachable: " + "; ".join(problems)
    if in_ci:
        pytest.fail(message + " (CI=true: the PostgreSQL tests must run in CI)")
    pytest.skip(message)


# --------------------------------------------------------------------- a real server

_RUNNING = re.compile(r"Uvicorn running on http://127\.0\.0\.1:(\d+)")


class Server:
    """``python -m service serve`` on 127.0.0.1, on a port the OS picks."""

    def __init__(self, database_url: str, log_path: Path, workers: int = 1,
                 env: dict[str, str] | None = None, args: list[str] | None = None) -> None:
        self.database_url = database_url
        self.log_path = log_path
        self.workers = workers
        self.env = env or {}
        self.args = args or []
        self.proc: subprocess.Popen | None = None
        self.log_file: Path | None = None
        self.base_url = ""
        self.starts = 0

    def start(self, timeout: float = 30.0) -> Server:
        env = dict(os.environ)
        env["PYTHONPATH"] = str(REPO) + os.pathsep + env.get("PYTHONPATH", "")
        env.update(self.env)
        self.starts += 1
        log_path = self.log_path.with_suffix(f".{self.starts}.log")
        self.log_file = log_path
        with open(log_path, "w") as log:
            self.proc = subprocess.Popen(
                [
                    sys.executable, "-m", "service", "serve",
                    "--host", "127.0.0.1", "--port", "0",
                    "--workers", str(self.workers),
                    "--database-url", self.database_url,
                    "--log-level", "info", *self.args,
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


def open_db(database_url: str, **settings: object) -> Database:
    return Database(Settings.from_env({"database_url": database_url, **settings}))


def app_client(db: Database, **options: Any) -> TestClient:
    """The app in process over ``db`` (use as a context manager); a server error comes
    back as a 500 response, not as an exception, for tests that check there is none."""
    return TestClient(create_app(db=db, **options), raise_server_exceptions=False)


def new_key(database_url: str, team: str, label: str = "tests") -> str:
    s = open_db(database_url)
    try:
        return usecases.create_key(s, team, label)[1]
    finally:
        s.close()


def auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


# --------------------------------------------------------------------- experiment plans
# The one place the service tests describe an experiment's metrics (their spelling may
# change in the library: change it here only). Invented scenario: the Millbrook Tea
# Room's ordering app tests two new texts of its "Add to basket" button against the
# current one; "orders" (visitors who order) is the primary, "refunds" (orders
# refunded) a guardrail that must not rise.

EXPERIMENT_ARMS = ("basket", "add-to-tray", "order-now")


def experiment_metrics(*, guardrail: bool = True, kind: str = "binary") -> list[dict]:
    """Metric descriptions for ``seqtest.experiment_plan`` (primary first)."""
    primary: dict = {"name": "orders", "kind": "binary", "baseline": 0.10, "mde": 0.03}
    if kind == "continuous":
        primary = {"name": "order_value", "kind": "continuous", "sd": 6.0, "mde": 1.0}
    if kind == "ratio":
        # items per order, visitors randomised (a pilot's per-visitor moments)
        primary = {"name": "items_per_order", "kind": "ratio", "numerator_mean": 2.4,
                   "denominator_mean": 1.1, "numerator_sd": 2.0, "denominator_sd": 0.8,
                   "covariance": 1.2, "mde": 0.15}
    out = [primary]
    if guardrail:
        out.append({"name": "refunds", "role": "guardrail", "better": "lower",
                    "kind": "binary", "baseline": 0.05, "mde": 0.03})
    return out


def experiment_inputs(arms: tuple[str, ...] | list[str] = EXPERIMENT_ARMS, *,
                      guardrail: bool = True, kind: str = "binary", looks: int = 3,
                      **options: object) -> dict:
    """The arguments of ``seqtest.experiment_plan`` for a test experiment."""
    return {"arms": list(arms), "metrics": experiment_metrics(guardrail=guardrail, kind=kind),
            "looks": looks, **options}


def experiment_document(arms: tuple[str, ...] | list[str] = EXPERIMENT_ARMS, *,
                        guardrail: bool = True, kind: str = "binary", looks: int = 3,
                        **options: object) -> dict:
    """A plan document of kind ``experiment`` made by the library."""
    import seqtest
    from service.library import json_safe
    return json_safe(seqtest.experiment_plan(**experiment_inputs(
        arms, guardrail=guardrail, kind=kind, looks=looks, **options)).to_dict())
