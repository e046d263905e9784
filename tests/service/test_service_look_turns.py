"""Looks take turns: one server process analyses and stores at most ``looks_at_once``
of them at once (``SEQTEST_LOOKS_AT_ONCE``), the others wait, first come first
served. Checked in process, on SQLite and PostgreSQL: the library's analysis is
wrapped to count how many looks are inside it at once (a count, not a timing).

What must hold (common practice for a bounded worker queue): never more at once
than the setting allows; as many as it allows when that many wait; every look
answered and stored once, as without the queue.
"""

from __future__ import annotations

import threading
from typing import Any

import pytest
from service_helpers import auth
from starlette.testclient import TestClient

from service import library, usecases
from service.api import create_app
from service.config import Settings
from service.db.engine import Database

POSTS = 6


class Inside:
    """Wraps ``library.analyze_look``: counts the analyses running at once and holds
    each until ``target`` are running (or ``wait_s`` passed), so that looks allowed
    to overlap do overlap, whatever the threads' timing."""

    def __init__(self, monkeypatch: pytest.MonkeyPatch, target: int, wait_s: float = 10.0
                 ) -> None:
        self.original = library.analyze_look
        self.target, self.wait_s = target, wait_s
        self.now = self.most = self.calls = 0
        self.cond = threading.Condition()
        monkeypatch.setattr(library, "analyze_look", self)

    def __call__(self, *args: Any, **kwargs: Any) -> library.LookOutcome:
        with self.cond:
            self.now += 1
            self.calls += 1
            self.most = max(self.most, self.now)
            self.cond.notify_all()
            self.cond.wait_for(lambda: self.now >= self.target, timeout=self.wait_s)
        try:
            return self.original(*args, **kwargs)
        finally:
            with self.cond:
                self.now -= 1
                self.target = min(self.target, POSTS - self.calls + self.now)
                self.cond.notify_all()


def _post_at_once(db: Database, settings: Settings) -> list[int]:
    """``POSTS`` looks posted at the same moment from as many threads, each to its own
    experiment; their status codes."""
    _, token = usecases.create_key(db, "lemon-grove")
    app = create_app(settings=settings, db=db)
    statuses: list[int] = []
    with TestClient(app, headers=auth(token)) as client:
        ids = [client.post("/v1/experiments", json={
            "name": f"tart {i}", "metric_kind": "binary", "max_n": 10**6,
            "design": {"looks": 5}}).json()["id"] for i in range(POSTS)]
        start = threading.Barrier(POSTS)

        def post(exp_id: str) -> None:
            start.wait()
            r = client.post(f"/v1/experiments/{exp_id}/looks", json={"totals": {
                "control": {"n": 1000, "successes": 100},
                "treatment": {"n": 1000, "successes": 112}}})
            statuses.append(r.status_code)

        threads = [threading.Thread(target=post, args=(i,)) for i in ids]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        for exp_id in ids:  # each stored once
            assert client.get(f"/v1/experiments/{exp_id}").json()["look_count"] == 1
    return statuses


@pytest.mark.parametrize("at_once", [1, 3])
def test_looks_take_turns(storage: Database, monkeypatch: pytest.MonkeyPatch, at_once: int):
    inside = Inside(monkeypatch, target=at_once)
    settings = Settings.from_env({"database_url": storage.url, "looks_at_once": at_once,
                                  "access_log": False})
    assert _post_at_once(storage, settings) == [201] * POSTS
    assert inside.calls == POSTS
    assert inside.most == at_once  # never more, and as many as allowed


def test_without_a_tighter_limit_the_posts_overlap(storage: Database,
                                                    monkeypatch: pytest.MonkeyPatch):
    """The harness can see overlap: with room for all, all six are inside at once
    (so the counts above come from the queue, not from the threads' timing)."""
    inside = Inside(monkeypatch, target=POSTS)
    settings = Settings.from_env({"database_url": storage.url, "looks_at_once": 64,
                                  "access_log": False})
    assert _post_at_once(storage, settings) == [201] * POSTS
    assert inside.most == POSTS


def test_the_setting_is_read_and_checked():
    assert Settings().looks_at_once == 2
    assert Settings.from_env(env={"SEQTEST_LOOKS_AT_ONCE": "5"}).looks_at_once == 5
    for bad in ("0", "65", "two"):
        with pytest.raises(ValueError, match="looks_at_once"):
            Settings.from_env(env={"SEQTEST_LOOKS_AT_ONCE": bad})
