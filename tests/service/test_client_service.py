"""seqtest.client and ``seqtest post`` against a live ``seqtest serve`` (SQLite).

The pipeline tests run a posting script as its own process, SIGKILL it after a few
looks (at a random point, often in the middle of a request), run it again, and check
that every look is stored exactly once, in order, and that the service's decision is
the library's ``seqtest.analyze`` on the same looks. The daily counts are invented
(seeded draws); the reference for the decision is the library itself, run here.
"""

from __future__ import annotations

import json
import os
import random
import selectors
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import pytest
from service_helpers import EXPERIMENT_ARMS, REPO, Server, experiment_document

import seqtest
from seqtest.cli import main
from seqtest.client import (
    Client,
    InvalidRequestError,
    LookMismatchError,
    normalize_totals,
)
from seqtest.reporting.status import ExitStatus, exit_status

ARMS = ("classic", "large")
PLAN_INPUTS: dict[str, Any] = dict(looks=5, metric={"kind": "binary", "baseline": 0.10,
                                                    "mde": 0.02})


@pytest.fixture(scope="module")
def plan_doc() -> dict[str, Any]:
    return seqtest.design(**PLAN_INPUTS).to_dict()


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, str]]:
    """A server on a temporary SQLite database, and a key made by ``seqtest keys create``."""
    tmp = tmp_path_factory.mktemp("client_service")
    url = f"sqlite:///{tmp / 'seqtest.db'}"
    made = subprocess.run(
        [sys.executable, "-m", "seqtest", "keys", "create", "--team", "juniper-bakery",
         "--label", "pipeline", "--json", "--database-url", url],
        cwd=REPO, capture_output=True, text=True, timeout=60)
    assert made.returncode == 0, made.stderr
    srv = Server(url, tmp / "server.log").start()
    try:
        yield {"url": srv.base_url, "key": json.loads(made.stdout)["key"], "tmp": str(tmp)}
    finally:
        srv.stop()


@pytest.fixture
def client(live: dict[str, str]) -> Iterator[Client]:
    with Client(live["url"], live["key"]) as c:
        yield c


@pytest.fixture
def env(live: dict[str, str], monkeypatch: pytest.MonkeyPatch) -> dict[str, str]:
    monkeypatch.setenv("SEQTEST_URL", live["url"])
    monkeypatch.setenv("SEQTEST_API_KEY", live["key"])
    return {**os.environ, "SEQTEST_URL": live["url"], "SEQTEST_API_KEY": live["key"],
            "PYTHONPATH": str(REPO)}


def cumulative(days: int, seed: int, p: tuple[float, float] = (0.10, 0.105),
               per_day: int = 400) -> list[dict[str, dict[str, int]]]:
    """Invented daily traffic of an invented shop, as cumulative looks per arm name."""
    rng = np.random.default_rng(seed)
    n = np.cumsum(rng.poisson(per_day, size=(days, 2)), axis=0)
    s = np.cumsum(rng.binomial(rng.poisson(per_day, size=(days, 2)), p), axis=0)
    s = np.minimum(s, n)
    return [{arm: {"n": int(n[d, i]), "successes": int(s[d, i])}
             for i, arm in enumerate(ARMS)} for d in range(days)]


def by_role(looks: list[dict[str, dict[str, int]]]) -> list[dict[str, dict[str, int]]]:
    return [{"control": lk[ARMS[0]], "treatment": lk[ARMS[1]]} for lk in looks]


def write_csv(path: Path, looks: list[dict[str, dict[str, int]]]) -> Path:
    lines = ["look,date,classic_n,classic_successes,large_n,large_successes"]
    for k, lk in enumerate(looks, start=1):
        lines.append(f"{k},2026-03-{k:02d},{lk['classic']['n']},{lk['classic']['successes']},"
                     f"{lk['large']['n']},{lk['large']['successes']}")
    path.write_text("\n".join(lines) + "\n")
    return path


def new_experiment(client: Client, plan_doc: dict, name: str) -> str:
    return client.create_experiment(name, plan=plan_doc, arms=ARMS,
                                    idempotency_key=f"test-{name}-{time.time_ns()}").id


# ---------------------------------------------------------------------------
# The pipeline, killed and run again
# ---------------------------------------------------------------------------

PIPELINE = '''
"""A nightly job: accumulate each day's counts and post the looks to the service."""
import json, sys
from seqtest.client import Client

days = json.load(open(sys.argv[1]))
looks, total = [], {}
for day in days:                       # cumulative totals, day by day
    total = {arm: {k: total.get(arm, {}).get(k, 0) + v for k, v in counts.items()}
             for arm, counts in day.items()}
    looks.append(total)

def show(number, answer):
    what = "stored" if answer is None else "replayed" if answer.replayed else "posted"
    print(f"look {number}: {what}", flush=True)

with Client() as client:               # $SEQTEST_URL, $SEQTEST_API_KEY
    result = client.post_looks(sys.argv[2], looks, on_look=show)
print("done", result.decision, flush=True)
'''


def daily(looks: list[dict[str, dict[str, int]]]) -> list[dict[str, dict[str, int]]]:
    out, before = [], {arm: {"n": 0, "successes": 0} for arm in ARMS}
    for lk in looks:
        out.append({arm: {k: lk[arm][k] - before[arm][k] for k in ("n", "successes")}
                    for arm in ARMS})
        before = lk
    return out


def run_and_kill(argv: list[str], env: dict[str, str], after: int | None,
                 rng: random.Random, timeout: float = 60.0) -> tuple[int | None, list[str]]:
    """Run the pipeline; with ``after``, SIGKILL it a random moment after its
    ``after``-th posted look, within one request's time (the median time between posted
    looks so far), so often in the middle of the next request."""
    proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env,
                            text=True, cwd=REPO, start_new_session=True)
    assert proc.stdout is not None
    lines: list[str] = []
    stamps: list[float] = []
    sel = selectors.DefaultSelector()
    sel.register(proc.stdout, selectors.EVENT_READ)
    deadline = time.monotonic() + timeout
    try:
        while time.monotonic() < deadline:
            if not sel.select(timeout=1.0):
                continue
            line = proc.stdout.readline()
            if not line:
                break
            lines.append(line.strip())
            if ": posted" in line or ": replayed" in line:
                stamps.append(time.monotonic())
            if after is not None and len(stamps) >= after:
                gaps = np.diff(stamps) if len(stamps) > 1 else np.array([0.02])
                time.sleep(rng.uniform(0.0, float(np.median(gaps))))
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait(timeout=10)
                return None, lines
        rc = proc.wait(timeout=max(1.0, deadline - time.monotonic()))
        assert proc.stderr is not None
        assert rc in (0, 3, 4, 5), proc.stderr.read()
        return rc, lines
    finally:
        sel.close()
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=10)


def check_stored_once_in_order(client: Client, exp_id: str, plan_doc: dict,
                               looks: list[dict[str, dict[str, int]]]) -> Any:
    got = client.experiment(exp_id)
    lib_all = seqtest.analyze(plan_doc, by_role(looks), metric="binary")
    k = lib_all.stopped_at or len(looks)          # the service takes no look after a stop
    assert got.look_count == k
    assert [lk.look for lk in got.looks] == list(range(1, k + 1))
    assert [normalize_totals(lk.totals) for lk in got.looks] == looks[:k]
    # the final decision is the library's on the same looks
    lib = seqtest.analyze(plan_doc, by_role(looks[:k]), metric="binary")
    assert got.decision == lib.decision.value
    assert got.analysis is not None
    assert got.analysis["decision"] == lib.decision.value
    assert got.analysis["stopped_at"] == lib.stopped_at
    rows = got.analysis["looks"]
    assert len(rows) == k
    for row, ref in zip(rows, lib.looks, strict=True):
        assert row["z"] == pytest.approx(ref.z, rel=1e-12, abs=1e-12)
        assert row["efficacy_z"] == pytest.approx(ref.efficacy_z, rel=1e-12, abs=1e-12)
        assert row["decision"] == ref.decision.value
    return lib


@pytest.mark.parametrize("door", ["client script", "seqtest post"])
def test_a_killed_pipeline_run_again_stores_every_look_once(door, client, env, plan_doc,
                                                            tmp_path):
    # 14 invented days at 10% against 11%: the plan stops for efficacy at look 12
    # (computed by the library below), so looks 13 and 14 are never posted
    looks = cumulative(days=14, seed=10, p=(0.10, 0.11))
    exp_id = new_experiment(client, plan_doc, f"pipeline-{door.replace(' ', '-')}")
    if door == "client script":
        script = tmp_path / "nightly.py"
        script.write_text(PIPELINE)
        data = tmp_path / "days.json"
        data.write_text(json.dumps(daily(looks)))
        argv = [sys.executable, str(script), str(data), exp_id]
    else:
        csv = write_csv(tmp_path / "looks.csv", looks)
        argv = [sys.executable, "-m", "seqtest", "post", str(csv), "--experiment", exp_id]
    rng = random.Random(f"{door}-kills")
    stored_after_kill = []
    for after in (3, 2):                             # two runs killed part-way
        rc, lines = run_and_kill(argv, env, after, rng)
        assert rc is None, lines
        stored_after_kill.append(client.experiment(exp_id, looks=False).look_count)
    assert stored_after_kill == sorted(stored_after_kill)
    assert 3 <= stored_after_kill[0] and stored_after_kill[-1] < 12, "killed half-way"
    rc, lines = run_and_kill(argv, env, None, rng)   # and one run to the end
    assert rc is not None
    lib = check_stored_once_in_order(client, exp_id, plan_doc, looks)
    assert lib.stopped_at == 12 and lib.decision.value == "stop_efficacy"
    if door == "seqtest post":
        assert rc == exit_status(lib)
        assert any(": already stored" in x for x in lines)
    else:
        assert rc == 0 and lines[-1] == f"done {lib.decision.value}"
        assert any(x.endswith(": stored") for x in lines)
    # and one more run posts nothing
    rc2, again = run_and_kill(argv, env, None, rng)
    assert rc2 == rc and not [x for x in again if ": posted" in x or ": replayed" in x]
    check_stored_once_in_order(client, exp_id, plan_doc, looks)


class LoseFirstAnswer(httpx.BaseTransport):
    """Sends requests on; the first look's answer is received and then lost, as when a
    connection drops after the service committed."""

    def __init__(self) -> None:
        self.inner = httpx.HTTPTransport()
        self.lost = 0

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        response = self.inner.handle_request(request)
        if request.method == "POST" and request.url.path.endswith("/looks") and not self.lost:
            response.read()
            response.close()
            self.lost += 1
            raise httpx.ReadError("connection lost after the service answered",
                                  request=request)
        return response

    def close(self) -> None:
        self.inner.close()


def test_a_lost_answer_is_retried_and_stored_once(live, client, plan_doc):
    exp_id = new_experiment(client, plan_doc, "lost-answer")
    looks = cumulative(days=2, seed=7)
    transport = LoseFirstAnswer()
    with Client(live["url"], live["key"], transport=transport) as c:
        c._sleep = lambda s: None
        answer = c.post_look(exp_id, looks[0], look=1)
    assert transport.lost == 1
    assert answer.look == 1 and answer.replayed     # the service's record, not a new look
    assert client.experiment(exp_id).look_count == 1


# ---------------------------------------------------------------------------
# post_looks
# ---------------------------------------------------------------------------

def test_post_looks_skips_stored_looks_and_refuses_different_ones(client, plan_doc):
    exp_id = new_experiment(client, plan_doc, "skips")
    looks = cumulative(days=4, seed=11)
    first = client.post_looks(exp_id, looks[:2])
    assert [a.look for a in first.posted] == [1, 2] and first.already_stored == []
    again = client.post_looks(exp_id, looks)
    assert again.already_stored == [1, 2] and [a.look for a in again.posted] == [3, 4]
    assert again.look_count == 4 and len(again.analysis["looks"]) == 4
    changed = [dict(lk) for lk in looks]
    changed[1] = {**changed[1], "large": {"n": changed[1]["large"]["n"] + 1,
                                          "successes": changed[1]["large"]["successes"]}}
    with pytest.raises(LookMismatchError) as info:
        client.post_looks(exp_id, changed)
    assert info.value.look == 2 and client.experiment(exp_id).look_count == 4
    # data starting at a later look: by number, or found by its totals
    assert client.post_looks(exp_id, looks[2:], first=3).already_stored == [3, 4]
    assert client.post_looks(exp_id, looks[3:], first=None).already_stored == [4]


def test_post_looks_stops_at_a_stop(client, plan_doc):
    exp_id = new_experiment(client, plan_doc, "stops")
    # 10% against 30% with 1500 users per arm: far beyond any boundary (fact of the trade)
    looks = [{"classic": {"n": 1500 * k, "successes": 150 * k},
              "large": {"n": 1500 * k, "successes": 450 * k}} for k in (1, 2, 3)]
    done = client.post_looks(exp_id, looks)
    assert [a.look for a in done.posted] == [1] and done.not_posted == [2, 3]
    assert done.state == "stopped" and done.decision == "stop_efficacy"
    assert "not posted" in done.notes[0]


def test_post_looks_reads_a_table_with_the_roles_or_the_arm_names(client, plan_doc):
    import pandas as pd
    exp_id = new_experiment(client, plan_doc, "tables")
    looks = cumulative(days=3, seed=5)
    wide = pd.DataFrame([{"control_users": lk["classic"]["n"],
                          "control_conversions": lk["classic"]["successes"],
                          "treatment_users": lk["large"]["n"],
                          "treatment_conversions": lk["large"]["successes"]}
                         for lk in looks])
    assert [a.look for a in client.post_looks(exp_id, wide[:2]).posted] == [1, 2]
    long = pd.DataFrame([{"day": k, "arm": arm, "n": lk[arm]["n"],
                          "successes": lk[arm]["successes"]}
                         for k, lk in enumerate(looks, 1) for arm in ARMS])
    done = client.post_looks(exp_id, long, columns={"day": "look"})
    assert done.already_stored == [1, 2] and [a.look for a in done.posted] == [3]
    # a list keyed by role (as seqtest.analyze takes it) goes under the arm names
    assert client.post_looks(exp_id, by_role(looks)).already_stored == [1, 2, 3]
    other = pd.DataFrame([{"classic_n": 10, "classic_successes": 1, "rank_v2_n": 10,
                           "rank_v2_successes": 1}])
    with pytest.raises(ValueError, match="arms: got 'classic' .* and 'rank_v2'"):
        client.post_looks(exp_id, other)


def test_service_refusals_are_input_errors(client, plan_doc):
    exp_id = new_experiment(client, plan_doc, "refused")
    with pytest.raises(InvalidRequestError) as info:
        client.post_look(exp_id, {"classic": {"n": 10, "successes": 20},
                                  "large": {"n": 10, "successes": 1}})
    assert info.value.code == "invalid_totals" and info.value.request_id
    assert info.value.details[0]["location"][:3] == ["body", "totals", "classic"]


def test_experiments_are_listed_and_read(client, plan_doc):
    exp_id = new_experiment(client, plan_doc, "listed")
    page = client.experiments(state="planned", limit=200)
    assert exp_id in [e.id for e in page.experiments]
    assert exp_id in [e.id for e in client.iter_experiments()]
    exp = client.experiment(exp_id)
    assert exp.state == "planned" and exp.arms == {"control": ARMS[0], "treatment": ARMS[1]}
    assert exp.boundaries is not None and len(exp.boundaries) == 5
    assert exp.plan_object().to_dict()["computed"] == plan_doc["computed"]


# ---------------------------------------------------------------------------
# seqtest post: exit statuses (seqtest.reporting.status)
# ---------------------------------------------------------------------------

def post(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    rc = main(["post", *argv])
    out, err = capsys.readouterr()
    return rc, out, err


def totals_args(c: tuple[int, int], t: tuple[int, int]) -> list[str]:
    return ["--total", f"classic.n={c[0]}", "--total", f"classic.successes={c[1]}",
            "--total", f"large.n={t[0]}", "--total", f"large.successes={t[1]}"]


def test_post_creates_once_and_exits_with_the_decision(env, capsys, plan_doc, tmp_path):
    plan = tmp_path / "plan.json"
    plan.write_text(json.dumps(plan_doc))
    looks = cumulative(days=2, seed=3)
    csv = write_csv(tmp_path / "looks.csv", looks)
    name = f"created-{time.time_ns()}"
    # the data's arms are not named control and treatment: which is the control is said
    rc, out, err = post([str(csv), "--create", "--plan", str(plan), "--name", name], capsys)
    assert rc == ExitStatus.USAGE_ERROR and "--control NAME" in err
    rc, out, err = post([str(csv), "--create", "--plan", str(plan), "--name", name,
                         "--control", "classic"], capsys)
    assert rc == ExitStatus.CONTINUE, err
    assert ": created" in out and "look 2: posted: continue" in out
    assert "Decision at look 2: CONTINUE" in out and "qualified statistician" in out
    rc, out, err = post([str(csv), "--create", "--plan", str(plan), "--name", name,
                         "--control", "classic", "--json", "-"], capsys)
    assert rc == ExitStatus.CONTINUE, err
    doc = json.loads(out)
    assert doc["already_stored"] == [1, 2] and doc["posted"] == []
    assert "created by an earlier run" in err
    assert doc["exit_status"] == 0 and doc["analysis"]["decision"] == "continue"


@pytest.mark.parametrize("case, status", [
    ("stop", ExitStatus.STOP),
    ("sample ratio", ExitStatus.SAMPLE_RATIO_MISMATCH),
    ("complete", ExitStatus.COMPLETE),
    ("backwards", ExitStatus.USAGE_ERROR),
    ("not found", ExitStatus.USAGE_ERROR),
    ("bad key", ExitStatus.USAGE_ERROR),
    ("unreachable", ExitStatus.SERVICE_ERROR),
])
def test_post_exit_statuses(case, status, client, env, capsys, plan_doc, monkeypatch):
    exp_id = new_experiment(client, plan_doc, f"status-{case.replace(' ', '-')}")
    client.post_look(exp_id, {"classic": {"n": 1000, "successes": 100},
                              "large": {"n": 1000, "successes": 100}})
    args = ["--experiment", exp_id]
    if case == "stop":
        # 10% against 30% at 3000 per arm: beyond any boundary (fact of the trade)
        args += totals_args((3000, 300), (3000, 900))
    elif case == "sample ratio":
        # 2000 against 1500 users in a planned 1:1 split: the chi-square test of the
        # split gives p ~ 1e-15, below the 0.001 threshold (common practice)
        args += totals_args((3000, 300), (2500, 250))
    elif case == "complete":
        args += [*totals_args((2000, 200), (2000, 201)), "--final"]
    elif case == "backwards":
        args += totals_args((500, 50), (1000, 100))
    elif case == "not found":
        args = ["--experiment", "exp_000000000000000000000000",
                *totals_args((2000, 200), (2000, 200))]
    elif case == "bad key":
        monkeypatch.setenv("SEQTEST_API_KEY", "sqt_" + "x" * 43)
        args += totals_args((2000, 200), (2000, 200))
    else:
        args += [*totals_args((2000, 200), (2000, 200)), "--url", "http://127.0.0.1:9",
                 "--deadline", "1", "--retries", "1"]
    rc, out, err = post(args, capsys)
    assert rc == status, (out, err)
    if status == ExitStatus.USAGE_ERROR:
        assert "seqtest post: error:" in err and "request id" in err
    if case == "unreachable":
        assert "no answer from the service" in err and "run the same command again" in err
    if case == "sample ratio":
        assert out.index("SAMPLE-RATIO MISMATCH") < out.index("Decision at look")


def test_post_of_one_look_twice_posts_it_once(client, env, capsys, plan_doc):
    exp_id = new_experiment(client, plan_doc, "one-look")
    args = ["--experiment", exp_id, *totals_args((1200, 120), (1200, 126))]
    assert post(args, capsys)[0] == ExitStatus.CONTINUE
    rc, out, _ = post(args, capsys)
    assert rc == ExitStatus.CONTINUE and "look 1: already stored" in out
    rc, out, err = post(["--experiment", exp_id, "--look", "1",
                         *totals_args((1200, 120), (1200, 127))], capsys)
    assert rc == ExitStatus.USAGE_ERROR and "look 1:" in err
    assert client.experiment(exp_id).look_count == 1


def test_post_reads_looks_with_a_query(client, env, capsys, plan_doc, tmp_path):
    # the readers of seqtest analyze: daily counts in a table, made cumulative by the
    # query (a window sum), in the long layout
    import sqlite3
    looks = cumulative(days=3, seed=21)
    db = tmp_path / "counts.db"
    with sqlite3.connect(db) as conn:
        conn.execute("CREATE TABLE daily (day INTEGER, variant TEXT, users INTEGER, "
                     "conversions INTEGER)")
        for k, day in enumerate(daily(looks), start=1):
            for arm in ARMS:
                conn.execute("INSERT INTO daily VALUES (?, ?, ?, ?)",
                             (k, arm, day[arm]["n"], day[arm]["successes"]))
    query = ("SELECT day, variant, SUM(users) OVER (PARTITION BY variant ORDER BY day) "
             "AS users, SUM(conversions) OVER (PARTITION BY variant ORDER BY day) AS "
             "conversions FROM daily ORDER BY day, variant")
    exp_id = new_experiment(client, plan_doc, "from-sql")
    rc, out, err = post(["--experiment", exp_id, "--sql", query, "--database-url",
                         f"sqlite:///{db}", "--column", "day=look", "--column",
                         "variant=arm"], capsys)
    assert rc == ExitStatus.CONTINUE, err
    stored = client.experiment(exp_id).looks
    assert [normalize_totals(lk.totals) for lk in stored] == looks


# ---------------------------------------------------------------------------
# Experiment plans: many arms, several metrics
# ---------------------------------------------------------------------------

def _binary(n: int, s: int) -> dict[str, int]:
    return {"n": n, "successes": s}


def test_client_posts_an_experiment_plans_looks_per_metric_and_arm(client):
    control, tray, now = EXPERIMENT_ARMS
    doc = experiment_document()
    exp = client.create_experiment(f"basket texts {time.time_ns()}", plan=doc)
    assert exp.is_experiment_plan and exp.arms == list(EXPERIMENT_ARMS)
    # the guardrail (refunds) is crossed by one arm at the first look
    look1 = {"orders": {control: _binary(900, 90), tray: _binary(900, 92),
                        now: _binary(900, 88)},
             "refunds": {control: _binary(400, 20), tray: _binary(400, 48),
                         now: _binary(400, 19)}}
    look2 = {"orders": {control: _binary(1800, 181), now: _binary(1800, 175)},
             "refunds": {control: _binary(800, 41), now: _binary(800, 40)}}
    result = client.post_looks(exp.id, [look1, look2])
    assert [a.look for a in result.posted] == [1, 2]
    expected = seqtest.analyze(doc, [look1, look2]).to_dict()
    assert result.decision == expected["decision"] == "continue"
    assert {a["arm"]: a["decision"] for a in result.analysis["arms"]} == \
        {tray: "stop_harm", now: "continue"}
    assert result.posted[0].raw["arm_states"] == {tray: "stopped", now: "running"}
    # run again: nothing is posted twice; a different stored look is refused
    again = client.post_looks(exp.id, [look1, look2])
    assert again.already_stored == [1, 2] and again.posted == []
    changed = json.loads(json.dumps(look1))
    changed["orders"][control]["n"] = 901
    with pytest.raises(LookMismatchError):
        client.post_looks(exp.id, [changed])


def test_post_sends_an_experiment_plans_looks_and_exits_with_its_decision(
        client, env, capsys, tmp_path):
    control, tray, now = EXPERIMENT_ARMS
    plan = tmp_path / "experiment.json"
    plan.write_text(json.dumps(experiment_document(guardrail=False)))

    def totals(*arms: tuple[str, int, int]) -> list[str]:
        out: list[str] = []
        for arm, n, s in arms:
            out += ["--total", f"{arm}.n={n}", "--total", f"{arm}.successes={s}"]
        return out
    name = f"cli basket texts {time.time_ns()}"
    rc, out, err = post(["--create", "--plan", str(plan), "--name", name,
                         *totals((control, 900, 90), (tray, 900, 95), (now, 900, 92))], capsys)
    assert rc == ExitStatus.CONTINUE, err
    assert "Decision: continue" in out and "qualified statistician" in out
    exp_id = out.split("experiment ", 1)[1].split(" ", 1)[0]
    # 10% against 30% for both arms at 1800 per arm: beyond any boundary (fact of the
    # trade): both arms stop for efficacy, the experiment stops: exit status 3
    rc, out, err = post(["--experiment", exp_id, *totals((control, 1800, 180),
                                                         (tray, 1800, 540),
                                                         (now, 1800, 545))], capsys)
    assert rc == ExitStatus.STOP, (out, err)
    assert client.experiment(exp_id).state == "stopped"


def test_post_exits_with_a_stop_for_harm(client, env, capsys):
    control, tray, now = EXPERIMENT_ARMS
    exp = client.create_experiment(f"harm {time.time_ns()}", plan=experiment_document(
        arms=[control, tray]))
    # refunds 12% against 5% at 400 orders: the harm boundary (Pocock-type, one-sided
    # 0.05, z about 2) is crossed; the only arm stops for harm, so does the experiment
    look = {"orders": {control: _binary(900, 90), tray: _binary(900, 92)},
            "refunds": {control: _binary(400, 20), tray: _binary(400, 48)}}
    answer = client.post_look(exp.id, look)
    assert answer.decision == "stop_harm" and answer.state == "stopped"
    from seqtest.cli.post import _status
    assert _status(answer.analysis) == ExitStatus.STOP
