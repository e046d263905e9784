"""seqtest.client without the service: retries, idempotency keys, error mapping, secrecy.

The server here is a scripted stand-in (the standard library's HTTP server in a
thread): each request gets the next scripted answer, so the tests say exactly which
failure the client meets. The error bodies are the service's documented shape
(service/README.md, "Errors": ``{"error": {"code", "message", "details"}}``, the
``Seqtest-Request-Id`` header, ``Retry-After`` on 503). Time is simulated where the
test is about waiting (``client._sleep`` and ``client._clock``), so no test sleeps
longer than a fraction of a second.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import random
import re
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import numpy as np
import pytest

from seqtest.client import (
    AuthenticationError,
    Client,
    ClientError,
    ConflictError,
    ExperimentClosedError,
    IdempotencyKeyReusedError,
    InvalidRequestError,
    NotFoundError,
    RequestRefusedError,
    RetryPolicy,
    ServerError,
    ServiceError,
    ServiceUnavailableError,
    ServiceUnreachableError,
    create_key,
    error_from_answer,
    look_key,
    normalize_totals,
)
from seqtest.core.errors import InputError, SeqtestError

KEY = "sqt_test-secret-" + "k" * 27
TOTALS = {"classic": {"n": 1500, "successes": 180}, "large": {"n": 1500, "successes": 200}}
# the service's rule for an Idempotency-Key (service/README.md, "Idempotency")
SERVICE_KEY_RULE = re.compile(r"^[\x21-\x7e]{1,200}$")


def look_body(look: int = 1) -> dict[str, Any]:
    return {"experiment_id": "exp_1", "look": look, "plan_version": 1, "final": False,
            "totals": TOTALS, "decision": "continue", "state": "running",
            "recorded_at": "2026-03-02T00:00:00Z", "recorded_by": "key_1",
            "result": {"look": look}, "analysis": {"decision": "continue", "looks": []}}


def error(status: int, code: str, message: str = "m", details: list | None = None,
          headers: dict[str, str] | None = None) -> Answer:
    err: dict[str, Any] = {"code": code, "message": message}
    if details is not None:
        err["details"] = details
    return Answer(status, {"error": err}, headers or {})


@dataclass
class Answer:
    status: int
    body: Any = None
    headers: dict[str, str] = field(default_factory=dict)
    drop: bool = False        # close the connection without answering
    delay: float = 0.0        # wait this long before answering


@dataclass
class Seen:
    method: str
    path: str
    headers: dict[str, str]
    body: Any


class Scripted:
    """An HTTP server answering each request with the next scripted answer."""

    def __init__(self, answers: list[Answer], port: int = 0) -> None:
        self.answers = list(answers)
        self.seen: list[Seen] = []
        outer = self

        class Handler(BaseHTTPRequestHandler):
            protocol_version = "HTTP/1.1"

            def log_message(self, *args: Any) -> None:
                pass

            def _handle(self) -> None:
                n = int(self.headers.get("Content-Length") or 0)
                raw = self.rfile.read(n) if n else b""
                outer.seen.append(Seen(self.command, self.path, dict(self.headers),
                                       json.loads(raw) if raw else None))
                a = outer.answers.pop(0) if outer.answers else Answer(599, {"error": {
                    "code": "script_ended", "message": "no more answers"}})
                if a.delay:
                    time.sleep(a.delay)
                if a.drop:
                    self.close_connection = True
                    self.connection.shutdown(socket.SHUT_RDWR)
                    return
                data = a.body if isinstance(a.body, bytes) else json.dumps(a.body).encode()
                self.send_response(a.status)
                for k, v in a.headers.items():
                    self.send_header(k, v)
                self.send_header("Content-Length", str(len(data)))
                if "Content-Type" not in a.headers:
                    self.send_header("Content-Type", "application/json")
                self.end_headers()
                self.wfile.write(data)

            do_GET = do_POST = _handle

        self.server = ThreadingHTTPServer(("127.0.0.1", port), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}"
        self.thread = threading.Thread(target=self.server.serve_forever, args=(0.02,),
                                       daemon=True)
        self.thread.start()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def scripted() -> Iterator[Any]:
    servers: list[Scripted] = []

    def make(*answers: Answer) -> Scripted:
        s = Scripted(list(answers))
        servers.append(s)
        return s

    yield make
    for s in servers:
        s.close()


class FakeTime:
    """A clock that only moves when the client sleeps."""

    def __init__(self) -> None:
        self.now = 0.0
        self.waits: list[float] = []

    def sleep(self, seconds: float) -> None:
        self.waits.append(seconds)
        self.now += seconds

    def clock(self) -> float:
        return self.now


def client_for(url: str, fake: FakeTime | None = None, **kw: Any) -> Client:
    kw.setdefault("retry", RetryPolicy(attempts=5, backoff=0.01, max_backoff=0.05,
                                       deadline=30))
    c = Client(url, KEY, **kw)
    if fake is not None:
        c._sleep = fake.sleep
        c._clock = fake.clock
    return c


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


# ---------------------------------------------------------------------------
# Retries (common practice: retry transient failures only, with capped, jittered
# exponential backoff and an overall deadline; never retry a request the server refused)
# ---------------------------------------------------------------------------

def test_503_then_success_is_retried_with_the_same_key_and_body(scripted):
    srv = scripted(error(503, "unavailable", "busy; nothing was stored",
                         headers={"Retry-After": "2"}),
                   Answer(201, look_body(), {"Seqtest-Replayed": "true"}))
    fake = FakeTime()
    with client_for(srv.url, fake) as c:
        answer = c.post_look("exp_1", TOTALS, look=1)
    assert answer.look == 1 and answer.decision == "continue" and answer.replayed
    assert len(srv.seen) == 2
    first, second = srv.seen
    assert first.headers["Idempotency-Key"] == second.headers["Idempotency-Key"]
    assert first.body == second.body == {"totals": TOTALS, "final": False}
    assert fake.waits and fake.waits[0] >= 2.0       # Retry-After waited at least


def test_500_and_a_dropped_connection_are_retried(scripted):
    srv = scripted(error(500, "internal_error", headers={"Connection": "close"}),
                   Answer(0, drop=True),
                   Answer(201, look_body()))
    fake = FakeTime()
    with client_for(srv.url, fake) as c:
        assert c.post_look("exp_1", TOTALS).look == 1
    assert len(srv.seen) == 3
    assert len({s.headers["Idempotency-Key"] for s in srv.seen}) == 1
    assert len(fake.waits) == 2


def test_connection_refused_then_up():
    port = free_port()
    started: list[Scripted] = []
    fake = FakeTime()

    def sleep(seconds: float) -> None:
        fake.sleep(seconds)
        if len(fake.waits) == 2:     # up after two refused tries
            started.append(Scripted([Answer(201, look_body())], port=port))

    c = client_for(f"http://127.0.0.1:{port}", fake)
    c._sleep = sleep
    try:
        assert c.post_look("exp_1", TOTALS).look == 1
        assert len(fake.waits) == 2 and len(started[0].seen) == 1
    finally:
        c.close()
        for s in started:
            s.close()


def test_connection_refused_throughout_raises_unreachable_after_the_attempts():
    fake = FakeTime()
    with client_for(f"http://127.0.0.1:{free_port()}", fake,
                    retry=RetryPolicy(attempts=3, backoff=0.01, deadline=30)) as c:
        with pytest.raises(ServiceUnreachableError) as info:
            c.post_look("exp_1", TOTALS)
    assert info.value.attempts == 3 and "ConnectError" in info.value.reason
    assert "same idempotency key" in str(info.value)
    assert len(fake.waits) == 2


def test_a_read_timeout_is_retried(scripted):
    srv = scripted(Answer(201, look_body(), delay=0.6), Answer(201, look_body()))
    with client_for(srv.url, timeout=0.2) as c:
        assert c.post_look("exp_1", TOTALS).look == 1
    assert len(srv.seen) == 2


@pytest.mark.parametrize("status, code, cls", [
    (400, "bad_request", RequestRefusedError),
    (401, "unauthorized", AuthenticationError),
    (404, "not_found", NotFoundError),
    (408, "request_timeout", RequestRefusedError),
    (409, "idempotency_key_reused", IdempotencyKeyReusedError),
    (413, "payload_too_large", RequestRefusedError),
    (415, "unsupported_media_type", RequestRefusedError),
    (422, "invalid_totals", InvalidRequestError),
])
def test_4xx_is_never_retried(scripted, status, code, cls):
    srv = scripted(error(status, code, "change the request"), Answer(201, look_body()))
    fake = FakeTime()
    with client_for(srv.url, fake) as c:
        with pytest.raises(cls) as info:
            c.post_look("exp_1", TOTALS)
    assert len(srv.seen) == 1 and fake.waits == []
    assert info.value.status == status and info.value.code == code


def test_retry_after_beyond_the_deadline_gives_up_at_once(scripted):
    srv = scripted(error(503, "unavailable", headers={"Retry-After": "100"}),
                   Answer(201, look_body()))
    fake = FakeTime()
    with client_for(srv.url, fake, retry=RetryPolicy(deadline=10)) as c:
        with pytest.raises(ServiceUnavailableError) as info:
            c.post_look("exp_1", TOTALS)
    assert info.value.retry_after == 100 and len(srv.seen) == 1 and fake.waits == []


def test_attempts_cap_the_tries(scripted):
    srv = scripted(*[error(503, "unavailable", headers={"Retry-After": "0"})] * 5)
    fake = FakeTime()
    with client_for(srv.url, fake, retry=RetryPolicy(attempts=3, backoff=0.01)) as c:
        with pytest.raises(ServiceUnavailableError):
            c.experiment("exp_1")
    assert len(srv.seen) == 3 and len(fake.waits) == 2


def test_the_deadline_bounds_the_waits(scripted):
    srv = scripted(*[error(500, "internal_error")] * 50)
    fake = FakeTime()
    policy = RetryPolicy(attempts=50, backoff=1.0, max_backoff=4.0, deadline=10.0)
    with client_for(srv.url, fake, retry=policy) as c:
        with pytest.raises(ServerError):
            c.post_look("exp_1", TOTALS)
    assert sum(fake.waits) < 10.0
    assert len(srv.seen) == len(fake.waits) + 1 < 50


def test_backoff_is_full_jitter_capped():
    # full jitter (common practice): retry r waits U(0, min(cap, base * 2**(r-1))).
    # Mean of U(0, c) is c/2, its sd c/sqrt(12); over n = 20000 draws the mean's sd is
    # c * 0.2887 / 141.4 = 0.00204 c, so a 5-sd bound is 0.0102 c.
    policy = RetryPolicy(backoff=0.5, max_backoff=8.0)
    rng = random.Random(20260302)
    for retry, ceiling in ((1, 0.5), (2, 1.0), (3, 2.0), (5, 8.0), (9, 8.0), (200, 8.0)):
        draws = np.array([policy.delay(retry, rng) for _ in range(20000)])
        assert draws.min() >= 0.0 and draws.max() <= ceiling
        assert abs(draws.mean() - ceiling / 2) < 0.0102 * ceiling
        assert draws.max() > 0.99 * ceiling


@pytest.mark.parametrize("kw", [dict(attempts=0), dict(attempts=1.5), dict(backoff=-1),
                                dict(deadline=0), dict(max_backoff=float("nan"))])
def test_retry_policy_refuses_bad_values(kw):
    with pytest.raises(InputError, match=r"got .*; allowed is"):
        RetryPolicy(**kw)


# ---------------------------------------------------------------------------
# Idempotency keys
# ---------------------------------------------------------------------------

def test_look_key_is_the_documented_hash():
    # the derivation stated in look_key's docstring, computed here from its words
    doc = {"experiment": "exp_0123", "look": 3, "totals": TOTALS}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(text.encode()).hexdigest()[:48]
    assert look_key("exp_0123", TOTALS, 3) == f"seqtest-v1-look-3-{digest}"
    doc["look"] = None
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    assert look_key("exp_0123", TOTALS) == \
        f"seqtest-v1-look-{hashlib.sha256(text.encode()).hexdigest()[:48]}"


def test_look_key_is_pinned():
    # re-runs within the service's key lifetime (7 days) rely on equal keys: a change of
    # derivation must change the prefix "seqtest-v1" (value written when the derivation
    # was made, by this function itself)
    assert look_key("exp_0123", TOTALS, 3) == \
        "seqtest-v1-look-3-f729d960bb06fe066fc2bb02ce3b638685ebfa3dd0ce3f7b"


def test_look_key_is_the_same_in_another_process():
    code = ("from seqtest.client import look_key; print(look_key('exp_0123', "
            f"{TOTALS!r}, 3))")
    env = {**os.environ, "PYTHONHASHSEED": "12345"}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=env, timeout=60, check=True).stdout.strip()
    assert out == look_key("exp_0123", TOTALS, 3)


def test_look_key_ignores_number_types_and_key_order():
    same = [
        {"large": {"successes": 200, "n": 1500}, "classic": {"successes": 180, "n": 1500}},
        {"classic": {"n": 1500.0, "successes": np.int64(180)},
         "large": {"n": np.float64(1500), "successes": 200}},
    ]
    for t in same:
        assert look_key("exp_1", t, 2) == look_key("exp_1", TOTALS, 2)
        assert normalize_totals(t) == TOTALS


def test_look_key_differs_by_experiment_look_and_totals():
    other = {**TOTALS, "large": {"n": 1500, "successes": 201}}
    keys = {look_key("exp_1", TOTALS, 2), look_key("exp_2", TOTALS, 2),
            look_key("exp_1", TOTALS, 3), look_key("exp_1", other, 2),
            look_key("exp_1", TOTALS)}
    assert len(keys) == 5
    assert all(SERVICE_KEY_RULE.match(k) for k in keys)
    assert SERVICE_KEY_RULE.match(create_key({"name": "x" * 5000}))


def test_final_and_daily_traffic_keep_the_look_key(scripted):
    # a re-run asking something else of a stored look must meet the same key (the
    # service then refuses it, 409) rather than a new key (stored as another look)
    srv = scripted(Answer(201, look_body()), Answer(201, look_body()))
    with client_for(srv.url) as c:
        c.post_look("exp_1", TOTALS, look=1)
        c.post_look("exp_1", TOTALS, look=1, final=True, daily_traffic=800)
    keys = [s.headers["Idempotency-Key"] for s in srv.seen]
    assert keys[0] == keys[1] == look_key("exp_1", TOTALS, 1)
    assert srv.seen[1].body == {"totals": TOTALS, "final": True, "daily_traffic": 800}


def test_explicit_keys_are_sent_and_checked(scripted):
    srv = scripted(Answer(201, look_body()))
    with client_for(srv.url) as c:
        c.post_look("exp_1", TOTALS, idempotency_key="nightly-2026-03-02")
        with pytest.raises(InputError, match="idempotency_key: got"):
            c.post_look("exp_1", TOTALS, idempotency_key="has space")
    assert srv.seen[0].headers["Idempotency-Key"] == "nightly-2026-03-02"


def test_create_key_follows_the_request(scripted):
    body = {**look_body(), "id": "exp_9", "name": "n", "metric_kind": "binary",
            "arms": {"control": "classic", "treatment": "large"}, "look_count": 0}
    srv = scripted(Answer(201, body), Answer(201, body, {"Seqtest-Replayed": "true"}),
                   Answer(201, body))
    with client_for(srv.url) as c:
        a = c.create_experiment("n", design={"looks": 5}, arms=("classic", "large"))
        b = c.create_experiment("n", design={"looks": 5}, arms=("classic", "large"))
        c.create_experiment("n", design={"looks": 6}, arms=("classic", "large"))
    k = [s.headers["Idempotency-Key"] for s in srv.seen]
    assert k[0] == k[1] != k[2] and not a.replayed and b.replayed
    assert k[0] == create_key(srv.seen[0].body)


@pytest.mark.parametrize("totals", [{}, {"classic": {}}, {"classic": {"n": "12"}},
                                    {"classic": {"n": float("nan")}},
                                    {"classic": {"n": True}}, ["classic"]])
def test_bad_totals_are_refused_before_sending(totals):
    with pytest.raises(InputError, match="totals.*got .*; allowed is"):
        normalize_totals(totals)


# ---------------------------------------------------------------------------
# Errors: the service's JSON error shape -> one exception tree
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("status, code, cls", [
    (401, "unauthorized", AuthenticationError),
    (404, "not_found", NotFoundError),
    (409, "conflict", ConflictError),
    (409, "experiment_closed", ExperimentClosedError),
    (409, "idempotency_key_reused", IdempotencyKeyReusedError),
    (413, "payload_too_large", RequestRefusedError),
    (422, "invalid_request", InvalidRequestError),
    (422, "invalid_totals", InvalidRequestError),
    (422, "invalid_plan", InvalidRequestError),
    (500, "internal_error", ServerError),
    (502, "bad_gateway", ServerError),
    (503, "unavailable", ServiceUnavailableError),
    # a code known for another status does not change the class of this one
    (422, "experiment_closed", InvalidRequestError),
])
def test_error_answers_map_to_the_tree(status, code, cls):
    details = [{"location": ["body", "totals", "classic", "n"], "message": "goes back"}]
    body = json.dumps({"error": {"code": code, "message": "what to change",
                                 "details": details}}).encode()
    err = error_from_answer(status, body, {"Seqtest-Request-Id": "abc123"},
                            method="POST", path="/v1/experiments/exp_1/looks")
    assert type(err) is cls
    assert isinstance(err, ServiceError) and isinstance(err, ClientError)
    assert isinstance(err, SeqtestError)
    assert (err.status, err.code, err.message) == (status, code, "what to change")
    assert err.details == details and err.request_id == "abc123"
    assert str(err) == (f"POST /v1/experiments/exp_1/looks: {status} {code}: what to "
                        "change (request id abc123)")
    assert isinstance(err, RequestRefusedError) == (status < 500)
    assert isinstance(err, ServerError) == (status >= 500)


def test_invalid_request_is_an_input_error():
    err = error_from_answer(422, b'{"error": {"code": "invalid_totals", "message": "m"}}', {})
    assert isinstance(err, InputError) and isinstance(err, ValueError)


def test_experiment_closed_carries_state_and_decision():
    body = {"error": {"code": "experiment_closed", "message": "closed", "details": [
        {"location": ["path", "experiment_id"], "message": "stopped", "state": "stopped",
         "decision": "stop_efficacy"}]}}
    err = error_from_answer(409, json.dumps(body).encode(), {})
    assert isinstance(err, ExperimentClosedError)
    assert (err.state, err.decision) == ("stopped", "stop_efficacy")


def test_an_answer_without_the_error_body_still_maps():
    # e.g. a proxy in front of the service answering 502 with a page of its own
    err = error_from_answer(502, b"<html>Bad Gateway</html>", {"Retry-After": "7"})
    assert type(err) is ServerError and err.code == "http_502"
    assert "Bad Gateway" in err.message and err.retry_after == 7


def test_the_request_id_of_a_500_is_read_from_its_body():
    body = {"error": {"code": "internal_error", "message": "unexpected", "details": [
        {"location": ["request"], "message": "x", "request_id": "feed01"}]}}
    assert error_from_answer(500, json.dumps(body).encode(), {}).request_id == "feed01"


def test_retry_after_as_an_http_date():
    when = time.strftime("%a, %d %b %Y %H:%M:%S GMT", time.gmtime(time.time() + 30))
    err = error_from_answer(503, b"", {"Retry-After": when})
    assert err.retry_after is not None and 25 <= err.retry_after <= 31


def test_errors_over_http_carry_the_request_id(scripted):
    srv = scripted(error(404, "not_found", "No experiment 'exp_x' for your team",
                         headers={"Seqtest-Request-Id": "r-42"}))
    with client_for(srv.url) as c:
        with pytest.raises(NotFoundError) as info:
            c.experiment("exp_x")
    assert info.value.request_id == "r-42" and info.value.method == "GET"
    assert info.value.path == "/v1/experiments/exp_x"


# ---------------------------------------------------------------------------
# The key stays secret; configuration
# ---------------------------------------------------------------------------

def test_the_key_never_appears_in_reprs_errors_or_logs(scripted, caplog):
    srv = scripted(error(500, "internal_error"), error(401, "unauthorized", "bad key"))
    caplog.set_level(logging.DEBUG)
    with client_for(srv.url, FakeTime()) as c:
        assert KEY not in repr(c) and "hidden" in repr(c)
        with pytest.raises(AuthenticationError) as info:
            c.post_look("exp_1", TOTALS)
    assert srv.seen[0].headers["Authorization"] == f"Bearer {KEY}"   # it was sent
    err = info.value
    texts = [str(err), repr(err), repr(vars(err)), repr(err.args),
             caplog.text, *(r.getMessage() for r in caplog.records)]
    assert caplog.records, "the retry was logged"
    assert not [t for t in texts if KEY in t]
    with pytest.raises(ServiceUnreachableError) as gone:
        with client_for(f"http://127.0.0.1:{free_port()}", FakeTime(),
                        retry=RetryPolicy(attempts=2)) as c2:
            c2.health()
    assert KEY not in str(gone.value) and KEY not in repr(vars(gone.value))


def test_a_bad_key_is_refused_without_showing_it():
    with pytest.raises(InputError) as info:
        Client("http://127.0.0.1:1", "sqt_secret value")
    assert "secret" not in str(info.value)


def test_url_and_key_from_the_environment(monkeypatch, scripted):
    srv = scripted(Answer(200, {"status": "ok"}))
    monkeypatch.setenv("SEQTEST_URL", srv.url)
    monkeypatch.setenv("SEQTEST_API_KEY", KEY)
    with Client() as c:
        assert c.base_url == srv.url and c.health() == {"status": "ok"}
    assert srv.seen[0].headers["Authorization"] == f"Bearer {KEY}"
    monkeypatch.delenv("SEQTEST_API_KEY")
    with pytest.raises(InputError, match="api_key: missing"):
        Client()
    monkeypatch.delenv("SEQTEST_URL")
    with Client(api_key=KEY) as c:
        assert c.base_url == "http://127.0.0.1:8000"


@pytest.mark.parametrize("url", ["ftp://host", "localhost:8000", "http://user:pw@host",
                                 ""])
def test_bad_urls_are_refused(url):
    with pytest.raises(InputError, match="base_url: got"):
        Client(url, KEY)


def test_importing_the_client_does_not_import_httpx():
    code = "import sys, seqtest.client; print('httpx' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=60, check=True).stdout.strip()
    assert out == "False"
