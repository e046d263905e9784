"""The service's part of ``seqtest demo``: the same looks, through real HTTP.

Starts the app with uvicorn in a background thread on 127.0.0.1 (a port the OS
picks) over an SQLite file, makes a demo team key, creates an experiment with
the given plan document and posts the looks one by one, as a pipeline would.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import httpx
import uvicorn

from service import usecases
from service.api.app import create_app
from service.config import Settings
from service.db.engine import Database
from service.library import json_safe


def post_demo_looks(
    plan: dict[str, Any], looks: Sequence[Mapping[str, Any]], database: Path
) -> str:
    """Post ``looks`` (``{"control": {...}, "treatment": {...}}`` totals) under
    ``plan`` (a plan document) through the HTTP service; return its last decision.

    Stops posting at the first look whose decision is not ``continue``.
    """
    settings = Settings.from_env({"database_url": f"sqlite:///{Path(database).resolve()}",
                                  "access_log": False})
    store = Database(settings)
    token = usecases.create_key(store, "demo-team", "seqtest demo")[1]
    server = uvicorn.Server(
        uvicorn.Config(create_app(settings=settings, db=store), host="127.0.0.1", port=0,
                       log_level="warning", access_log=False)
    )
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    try:
        deadline = time.monotonic() + 30
        while not server.started:
            if time.monotonic() > deadline or not thread.is_alive():
                raise RuntimeError("the demo service did not start")
            time.sleep(0.02)
        port = server.servers[0].sockets[0].getsockname()[1]
        headers = {"Authorization": f"Bearer {token}"}
        with httpx.Client(base_url=f"http://127.0.0.1:{port}", headers=headers,
                          timeout=60) as client:
            r = client.post("/v1/experiments", json={"name": "demo", "plan": plan})
            r.raise_for_status()
            exp_id = r.json()["id"]
            decision = "continue"
            for i, totals in enumerate(looks, start=1):
                r = client.post(
                    f"/v1/experiments/{exp_id}/looks",
                    json={"totals": json_safe({"control": dict(totals["control"]),
                                               "treatment": dict(totals["treatment"])})},
                    headers={"Idempotency-Key": f"demo-look-{i}"},
                )
                r.raise_for_status()
                decision = r.json()["decision"]
                if decision != "continue":
                    break
            return decision
    finally:
        server.should_exit = True
        thread.join(timeout=30)
        store.close()


def demo(plan: dict[str, Any], looks: Sequence[Mapping[str, Any]], out_dir: Path) -> str:
    """The service's part of ``seqtest demo`` (entry point ``seqtest.demos``): post the
    looks through a real loopback server on ``out_dir/demo.db``; the last decision."""
    return post_demo_looks(plan, looks, Path(out_dir) / "demo.db")
