"""Hostile input against a real ``python -m service serve``, on SQLite and PostgreSQL.

A seeded generator sends at least 10,000 requests over every route through
keep-alive connections from several threads: malformed JSON, wrong types, huge and
non-finite numbers, long number literals, NUL characters and lone surrogates in
strings, keys and paths, tampered and mangled plan documents, bad API keys,
idempotency keys and ids, wrong and missing content types, unknown routes and
methods, oversize bodies, and (over raw sockets) slow and unfinished bodies.

It must see no answer of 500 or above, no connection dropped without an answer, an
error body with a message on every refusal, and every experiment it created
readable afterwards. ``SEQTEST_HOSTILE_REQUESTS`` changes the number of generated
requests (default 10,000 per database).
"""

from __future__ import annotations

import copy
import json
import os
import random
import socket
import string
import threading
import time
from collections import Counter
from pathlib import Path
from typing import Any

import httpx
from service_helpers import (
    EXPERIMENT_ARMS,
    Server,
    auth,
    experiment_document,
    experiment_inputs,
    new_key,
)

import seqtest
from service.library import json_safe

SEED = 20241202
REQUESTS = int(os.environ.get("SEQTEST_HOSTILE_REQUESTS", "10000"))
THREADS = 6
METRICS = {
    "binary": {"kind": "binary", "baseline": 0.1, "mde": 0.02},
    "continuous": {"kind": "continuous", "sd": 5.0, "mde": 1.0},
    "rate": {"kind": "rate", "baseline": 0.5, "mde": 0.05},
}
DOCS = [
    json_safe(seqtest.design(looks=4, metric=METRICS["binary"]).to_dict()),
    json_safe(seqtest.design(looks=3, efficacy="pocock-type", futility="pocock-type",
                             metric=METRICS["continuous"]).to_dict()),
    json_safe(seqtest.design(looks=5, efficacy="haybittle-peto").to_dict()),
    json_safe(seqtest.mixture.mixture_plan(alpha=0.05, metric=METRICS["binary"]).to_dict()),
]
# experiment plans (many arms, several metrics): kind "experiment" in the generator
EXP_DOCS = [experiment_document(), experiment_document(arms=EXPERIMENT_ARMS[:2],
                                                       guardrail=False, looks=2)]
EXP_METRICS = [["orders", "refunds"], ["orders"]]
HOSTILE_NUMBERS = ["NaN", "Infinity", "-Infinity", "1e999", "-1e999", "1" + "0" * 60,
                   "1e308", "-1e308", "1e-320", "0", "-0", "-1", "0.5", "1" + "0" * 400,
                   "123456789012345678901234567890", "2", "3", "100", "1e15"]
HOSTILE_TEXT = ["\x00", "a\x00b", "\ud800", "\udfff\ud800", "\udbff", "x" * 300, "",
                " ", "é", "\u202e", "🍞", "\n", "'; DROP TABLE looks; --", "%00", "\\u0000"]


class Gen:
    """The request generator (seeded)."""

    def __init__(self, rng: random.Random, key: str, other_key: str) -> None:
        self.rng = rng
        self.key = key
        self.other_key = other_key
        self.experiments: list[tuple[str, str, list[str], int]] = []  # id, kind, arms, n
        self.lock = threading.Lock()

    # -- values -------------------------------------------------------------------

    def number_text(self) -> str:
        r = self.rng
        if r.random() < 0.5:
            return r.choice(HOSTILE_NUMBERS)
        return repr(r.choice([r.randint(-10, 10**6), r.uniform(-1e6, 1e6), r.random()]))

    def text(self) -> str:
        r = self.rng
        if r.random() < 0.5:
            return r.choice(HOSTILE_TEXT)
        return "".join(r.choice(string.printable) for _ in range(r.randint(0, 12)))

    def value_text(self, depth: int = 0) -> str:
        """JSON text of an arbitrary, often hostile, value."""
        r = self.rng
        x = r.random()
        if depth > 2 or x < 0.35:
            return self.number_text()
        if x < 0.6:
            return json.dumps(self.text())
        if x < 0.7:
            return r.choice(["true", "false", "null"])
        if x < 0.85:
            return "[" + ", ".join(self.value_text(depth + 1)
                                   for _ in range(r.randint(0, 3))) + "]"
        return "{" + ", ".join(f"{json.dumps(self.text())}: {self.value_text(depth + 1)}"
                               for _ in range(r.randint(0, 3))) + "}"

    def mangle(self, obj: Any) -> str:
        """JSON text of ``obj`` with one value (or key) replaced by a hostile one."""
        text = json.dumps(obj)
        marker = "\u0001MARK\u0001"
        target = copy.deepcopy(obj)
        node = target
        path = []
        for _ in range(self.rng.randint(1, 4)):
            if isinstance(node, dict) and node:
                k = self.rng.choice(sorted(node))
                path.append(k)
                if isinstance(node[k], (dict, list)) and node[k] and self.rng.random() < 0.7:
                    node = node[k]
                    continue
                action = self.rng.random()
                if action < 0.15:
                    del node[k]
                    return json.dumps(target)
                if action < 0.25:
                    node[self.text()] = marker
                else:
                    node[k] = marker
                break
            if isinstance(node, list) and node:
                i = self.rng.randrange(len(node))
                if isinstance(node[i], (dict, list)) and node[i] and self.rng.random() < 0.5:
                    node = node[i]
                    continue
                if self.rng.random() < 0.2:
                    del node[self.rng.randrange(len(node)):]
                    return json.dumps(target)
                node[i] = marker
                break
            break
        text = json.dumps(target)
        return text.replace(json.dumps(marker), self.value_text(), 1)

    # -- pieces ---------------------------------------------------------------------

    def headers(self, ctype: str | None = "application/json") -> dict[str, Any]:
        r = self.rng
        h: dict[str, Any] = {}
        x = r.random()
        if x < 0.9:
            h["Authorization"] = f"Bearer {self.key}"
        elif x < 0.93:
            h["Authorization"] = f"Bearer {self.other_key}"
        elif x < 0.96:
            h["Authorization"] = r.choice(["Bearer sqt_nope", "Basic abc", "Bearer  sqt_x",
                                           "bearer", "Bearer " + "x" * 500])
        elif x < 0.98:
            h["Authorization"] = b"Bearer sqt_\xff\xfe\x80"
        if ctype is not None:
            h["Content-Type"] = ctype
        if r.random() < 0.3:
            h["Idempotency-Key"] = r.choice([
                f"key-{r.randrange(300)}", "has space", "x" * 300, "",
                b"caf\xe9", f"k{r.random()}"])
        return h

    def experiment(self) -> tuple[str, str, list[str], int] | None:
        with self.lock:
            if not self.experiments:
                return None
            return self.rng.choice(self.experiments)

    def exp_id(self) -> str:
        r = self.rng
        e = self.experiment()
        x = r.random()
        if e is not None and x < 0.75:
            return e[0]
        return r.choice(["exp_000000000000000000000000", "exp_%00", "exp_%ED%A0%80",
                         "%F0%9F%8D%9E", "x" * 300, "exp_%20", "..", "exp_%0A", "%C3%A9"])

    def design(self) -> dict[str, Any]:
        r = self.rng
        kind = r.choice(["group_sequential"] * 4 + ["mixture"])
        d: dict[str, Any] = {}
        if kind == "mixture":
            d["kind"] = "mixture"
            d["metric"] = r.choice(list(METRICS.values()))
        else:
            d["looks"] = r.randint(1, 6)
            d["metric"] = r.choice(list(METRICS.values()))
            if r.random() < 0.3:
                d["efficacy"] = r.choice(["pocock-type", "obrien-fleming-type", "hsd:-2",
                                          "pocock", "haybittle-peto", "wang-tsiatis:0.3"])
            if r.random() < 0.2:
                d["futility"] = "pocock-type"
                d["binding"] = r.random() < 0.5
        return d

    def experiment_totals(self, kind: str, arms: list[str], n: int) -> dict[str, Any]:
        """A look of an experiment plan: per arm (one metric) or per metric and arm,
        sometimes with an unknown metric or arm, an arm left out, or a metric's totals
        flat."""
        r = self.rng
        metrics = EXP_METRICS[int(kind.split(":")[1])]
        per = {m: {a: {"n": n if m == "orders" else n // 10,
                       "successes": max(0, (n // 10 if m == "orders" else n // 200)
                                        + r.randint(-2, 2))} for a in arms}
               for m in metrics}
        x = r.random()
        if x < 0.05:
            per["sales"] = copy.deepcopy(per[metrics[0]])
        elif x < 0.1:
            per[metrics[0]]["teapot"] = {"n": n, "successes": 1}
        elif x < 0.15 and len(arms) > 2:
            del per[metrics[0]][arms[-1]]
        if len(metrics) == 1 and r.random() < 0.7:
            return per[metrics[0]]
        return per

    def totals(self, kind: str, arms: list[str], n: int) -> dict[str, Any]:
        r = self.rng
        if kind.startswith("experiment"):
            return self.experiment_totals(kind, arms, n)
        out = {}
        for arm in arms:  # plausible totals of two similar arms (most looks continue)
            if kind == "binary":
                out[arm] = {"n": n, "successes": max(0, n // 10 + r.randint(-3, 3))}
            elif kind == "rate":
                out[arm] = {"exposure": float(n), "events": max(0, n // 2 + r.randint(-3, 3))}
            else:
                m = 11 + r.uniform(-0.01, 0.01)
                out[arm] = {"n": n, "sum": n * m, "sum_sq": n * m * m + (n - 1) * 25.0}
        return out

    # -- requests -------------------------------------------------------------------

    def request(self) -> tuple[str, str, dict[str, Any], bytes | None, str]:
        """(method, url, headers, body, route label)."""
        r = self.rng
        x = r.random()
        if x < 0.04:
            return "GET", "/v1/health", {}, None, "health"
        if x < 0.10:
            q = r.choice(["", "?state=running", "?state=%00", "?limit=0", "?limit=abc",
                          "?offset=-1", "?limit=200&offset=1000000000", "?state=\u00e9",
                          "?offset=1" + "0" * 50, "?state=stopped&limit=5"])
            return "GET", "/v1/experiments" + q, self.headers(None), None, "list"
        if x < 0.17:
            q = r.choice(["", "?looks_limit=1000", "?looks_offset=1&looks_limit=2",
                          "?looks_limit=0", "?versions_limit=abc", "?looks_offset=%00"])
            return "GET", f"/v1/experiments/{self.exp_id()}{q}", self.headers(None), None, \
                "get"
        if x < 0.22:
            n = r.choice(["1", "2", "0", "-1", "1" + "0" * 30, "abc", "%00", "3"])
            return "GET", f"/v1/experiments/{self.exp_id()}/looks/{n}", self.headers(None), \
                None, "get_look"
        if x < 0.25:
            method = r.choice(["DELETE", "PUT", "PATCH", "OPTIONS"])
            url = r.choice(["/v1/experiments", f"/v1/experiments/{self.exp_id()}", "/v1/x",
                            "/", "/v2/experiments"])
            return method, url, self.headers(), b"{}", "other"
        if x < 0.47:
            return self.create()
        if x < 0.85:
            return self.look()
        return self.amend()

    def body_variant(self, good: Any, label: str) -> tuple[dict[str, Any], bytes, str]:
        """A body: good, mangled, malformed, wrongly typed, or of the wrong content type."""
        r = self.rng
        x = r.random()
        ctype = "application/json"
        if x < 0.35:
            text = json.dumps(good)
        elif x < 0.75:
            text = self.mangle(good)
        elif x < 0.82:
            text = json.dumps(good)[: r.randint(0, 40)]  # truncated JSON
        elif x < 0.87:
            text = self.value_text()
        elif x < 0.92:
            ctype = r.choice(["text/plain", "application/x-www-form-urlencoded", "",
                              "application/json; charset=latin-1", "multipart/form-data"])
            text = json.dumps(good)
        elif x < 0.95:
            raw = bytes(r.randrange(256) for _ in range(r.randint(0, 60)))
            return self.headers(ctype), raw, label
        else:
            text = json.dumps({**good, "extra_" + self.text()[:5]: 1}) if isinstance(
                good, dict) else json.dumps(good)
        headers = self.headers(ctype or None)
        return headers, text.encode("utf-8", "surrogatepass"), label

    def create(self) -> tuple[str, str, dict[str, Any], bytes | None, str]:
        r = self.rng
        body: dict[str, Any] = {"name": r.choice(["checkout", "basket", "banner"]),
                                "arms": {"control": "classic", "treatment": "large"}}
        x = r.random()
        if x < 0.04:  # an experiment plan's document, often tampered by body_variant
            body = {"name": "basket texts", "plan": copy.deepcopy(r.choice(EXP_DOCS))}
            if r.random() < 0.3:
                body["arms"] = r.choice([list(EXPERIMENT_ARMS), ["basket"],
                                         [f"arm{i}" for i in range(10)],
                                         {"control": "basket", "treatment": "add-to-tray"}])
        elif x < 0.07:  # design inputs of an experiment plan, with hostile arm counts
            inputs = experiment_inputs(looks=r.randint(1, 4))
            inputs["arms"] = r.choice([list(EXPERIMENT_ARMS), ["basket"], 1, 10,
                                       [f"arm{i}" for i in range(10)], 3])
            body = {"name": "basket texts", "design": {"kind": "experiment", **inputs}}
        elif r.random() < 0.6:
            body["design"] = self.design()
        else:
            doc = copy.deepcopy(r.choice(DOCS))
            body["plan"] = doc
            if doc.get("inputs", {}).get("metric") is None:
                body["metric_kind"] = "binary"
                body["max_n"] = 20000
        if r.random() < 0.1:
            body["name"] = self.text()
        headers, raw, label = self.body_variant(body, "create")
        return "POST", "/v1/experiments", headers, raw, label

    def look(self) -> tuple[str, str, dict[str, Any], bytes | None, str]:
        r = self.rng
        e = self.experiment()
        if e is None:
            return self.create()
        exp_id, kind, arms, n = e
        n_next = n + r.randint(50, 400)
        body: dict[str, Any] = {"totals": self.totals(kind, arms, n_next)}
        if r.random() < 0.003:
            body["final"] = True
        if r.random() < 0.1:
            body["daily_traffic"] = r.choice([100, 0, -1, 1e300])
        with self.lock:  # later looks build on the newest totals sent
            for i, (eid, k, a, _) in enumerate(self.experiments):
                if eid == exp_id:
                    self.experiments[i] = (eid, k, a, n_next)
        headers, raw, label = self.body_variant(body, "look")
        url = f"/v1/experiments/{exp_id if r.random() < 0.9 else self.exp_id()}/looks"
        return "POST", url, headers, raw, label

    def amend(self) -> tuple[str, str, dict[str, Any], bytes | None, str]:
        r = self.rng
        body: dict[str, Any] = {"reason": r.choice(["holiday", "traffic", self.text()])}
        x = r.random()
        if x < 0.5:
            body["design"] = {"looks": r.randint(1, 8)}
        elif x < 0.8:
            body["design"] = self.design()
        else:
            body["plan"] = copy.deepcopy(r.choice(DOCS))
        if r.random() < 0.2:
            body["max_n"] = r.choice([1000, 10**6, 0, -5])
        headers, raw, label = self.body_variant(body, "amend")
        return "POST", f"/v1/experiments/{self.exp_id()}/amendments", headers, raw, label


def _slow_and_unfinished(port: int, key: str, count: int) -> list[str]:
    """Raw sockets: bodies that stop half way (408 expected), bodies sent slowly but
    completely (answered), and oversize chunked bodies (413). Returns problems."""
    problems: list[str] = []

    def one(i: int) -> None:
        s = socket.create_connection(("127.0.0.1", port), timeout=15)
        try:
            head = (f"POST /v1/experiments HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer {key}"
                    "\r\nContent-Type: application/json\r\n").encode()
            body = json.dumps({"name": "slow", "design": {"looks": 3, "metric":
                                                          METRICS["binary"]}}).encode()
            if i % 3 == 0:  # unfinished
                s.sendall(head + b"Content-Length: 500\r\n\r\n" + body[:20])
                want = b"HTTP/1.1 408"
            elif i % 3 == 1:  # slow, complete
                s.sendall(head + f"Content-Length: {len(body)}\r\n\r\n".encode())
                for k in range(0, len(body), 25):
                    time.sleep(0.05)
                    s.sendall(body[k:k + 25])
                want = b"HTTP/1.1 201"
            else:  # oversize, chunked
                s.sendall(head + b"Transfer-Encoding: chunked\r\n\r\n")
                chunk = b"x" * 8192
                try:
                    for _ in range(12):
                        s.sendall(f"{len(chunk):x}\r\n".encode() + chunk + b"\r\n")
                except OSError:
                    pass
                want = b"HTTP/1.1 413"
            answer = s.recv(4096)
            if not answer.startswith(want):
                problems.append(f"{i}: wanted {want!r}, got {answer[:80]!r}")
        except OSError as exc:
            problems.append(f"{i}: {type(exc).__name__} {exc}")
        finally:
            s.close()

    threads = [threading.Thread(target=one, args=(i,)) for i in range(count)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return problems


def test_hostile_requests_through_a_real_server(module_database_url: str, tmp_path: Path):
    srv = Server(module_database_url, tmp_path / "server.log",
                 args=["--no-access-log", "--body-timeout", "1", "--header-timeout", "5"]
                 ).start()
    key = new_key(module_database_url, "team-hostile")
    other = new_key(module_database_url, "team-hostile-other")
    rng = random.Random(SEED)
    gen = Gen(rng, key, other)
    # a few experiments of each metric kind to post looks to
    with httpx.Client(base_url=srv.base_url, timeout=60, headers=auth(key)) as c:
        for kind, metric in METRICS.items():
            for arms in (["control", "treatment"], ["classic", "large"]) * 10:
                r = c.post("/v1/experiments", json={
                    "name": kind, "arms": {"control": arms[0], "treatment": arms[1]},
                    "design": {"looks": 5, "metric": metric}, "max_n": 10**7})
                assert r.status_code == 201, r.text
                gen.experiments.append((r.json()["id"], kind, arms, 0))
        for i, doc in enumerate(EXP_DOCS):  # experiment plans: many arms, metrics
            for _ in range(3):
                r = c.post("/v1/experiments", json={"name": f"experiment {i}", "plan": doc})
                assert r.status_code == 201, r.text
                gen.experiments.append((r.json()["id"], f"experiment:{i}",
                                        list(r.json()["arms"]), 0))
        setup = len(gen.experiments)
    # generate every request up front, from the one seeded generator; the threads
    # only send them (a look's totals grow in the order generated)
    planned = [gen.request() for _ in range(REQUESTS)]
    statuses: Counter[int] = Counter()
    by_route: Counter[str] = Counter()
    problems: list[str] = []
    created: list[tuple[str, Any]] = []  # id, the Authorization it was created with
    looks_stored: Counter[str] = Counter()  # looks answered 201 (not replayed), per id
    lock = threading.Lock()
    t0 = time.monotonic()

    def worker(part: list[tuple[str, str, dict[str, Any], bytes | None, str]]) -> None:
        with httpx.Client(base_url=srv.base_url, timeout=60) as c:
            for method, url, headers, body, label in part:
                try:
                    r = c.request(method, url, headers=headers, content=body)
                except httpx.TransportError as exc:
                    with lock:
                        problems.append(f"dropped: {method} {url[:80]} {type(exc).__name__}")
                    continue
                with lock:
                    statuses[r.status_code] += 1
                    by_route[label] += 1
                if r.status_code >= 500:
                    with lock:
                        problems.append(f"{r.status_code} {method} {url[:80]}: {r.text[:300]}")
                elif r.status_code >= 400:
                    try:
                        msg = r.json()["error"]["message"]
                        assert isinstance(msg, str) and msg
                    except Exception:  # noqa: BLE001 - recorded
                        with lock:
                            problems.append(f"no error message: {r.status_code} {r.text[:200]}")
                elif method == "POST" and url == "/v1/experiments" and r.status_code == 201:
                    with lock:
                        created.append((r.json()["id"], headers["Authorization"]))
                elif method == "POST" and url.endswith("/looks") and r.status_code == 201 \
                        and r.headers.get("Seqtest-Replayed") != "true":
                    with lock:
                        looks_stored[r.json()["experiment_id"]] += 1

    parts = [planned[i::THREADS] for i in range(THREADS)]
    pool = [threading.Thread(target=worker, args=(p,)) for p in parts]
    for t in pool:
        t.start()
    raw_problems = _slow_and_unfinished(int(srv.base_url.rsplit(":", 1)[1]), key, 30)
    for t in pool:
        t.join()
    took = time.monotonic() - t0

    # every experiment created is readable, with its looks
    unreadable: list[str] = []
    miscounted: list[str] = []
    mine = f"Bearer {key}"
    to_read = created + [(e[0], mine) for e in gen.experiments]
    t1 = time.monotonic()

    def reader(part: list[tuple[str, Any]]) -> None:
        with httpx.Client(base_url=srv.base_url, timeout=60) as c:
            for exp_id, who in part:
                h = {"Authorization": who}
                r = c.get(f"/v1/experiments/{exp_id}", params={"looks_limit": 1000},
                          headers=h)
                if r.status_code != 200:
                    unreadable.append(f"{exp_id}: {r.status_code} {r.text[:200]}")
                    continue
                n = r.json()["look_count"]
                if n != looks_stored[exp_id]:  # a refused look stored nothing
                    miscounted.append(f"{exp_id}: {n} looks stored, "
                                      f"{looks_stored[exp_id]} acknowledged")
                if n and c.get(f"/v1/experiments/{exp_id}/looks/{n}",
                               headers=h).status_code != 200:
                    unreadable.append(f"{exp_id}: look {n} unreadable")

    readers = [threading.Thread(target=reader, args=(to_read[i::4],)) for i in range(4)]
    for t in readers:
        t.start()
    for t in readers:
        t.join()
    read_took = time.monotonic() - t1
    with httpx.Client(base_url=srv.base_url, timeout=60, headers=auth(key)) as c:
        listed_total = c.get("/v1/experiments").json()["total"]
    srv.stop()
    assert srv.log_file is not None
    log = srv.log_file.read_text()
    print(f"\nhostile: {sum(statuses.values())} requests in {took:.1f} s on "
          f"{module_database_url.split(':')[0]}; statuses {dict(sorted(statuses.items()))}; "
          f"routes {dict(by_route)}; {len(created)} experiments created and read back in "
          f"{read_took:.1f} s; raw-socket requests 30")
    assert not problems, problems[:20]
    assert not raw_problems, raw_problems
    assert not unreadable, unreadable[:20]
    assert not miscounted, miscounted[:20]
    # a refused create stored nothing: the team has the experiments set up and those
    # acknowledged, no more
    mine_created = {i for i, who in created if who == mine}
    print(f"experiment plans: {sum(1 for e in gen.experiments if e[1].startswith('exp'))} "
          f"set up, {sum(looks_stored[e[0]] for e in gen.experiments if e[1].startswith('exp'))}"
          " looks stored")
    slow_creates = sum(1 for i in range(30) if i % 3 == 1)  # _slow_and_unfinished's 201s
    assert listed_total == setup + len(mine_created) + slow_creates, (
        listed_total, setup, len(mine_created), slow_creates)
    assert sum(statuses.values()) == REQUESTS
    assert statuses[201] > 200 and statuses[422] > 1000  # it reached the library, and beyond
    assert set(by_route) >= {"health", "list", "get", "get_look", "other", "create", "look",
                             "amend"}
    assert "unexpected error" not in log and "Traceback" not in log
