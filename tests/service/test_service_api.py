"""The HTTP API in process (TestClient over the app, SQLite file).

Routes, error bodies, validation, idempotency, amendments, team isolation. The
same guarantees are exercised through a real server on both databases in
test_server.py.
"""

from __future__ import annotations

import json

import pytest
from fastapi.testclient import TestClient
from service_helpers import app_client, auth, open_db

import seqtest
from service import usecases
from service.api import create_app
from service.db import migrations
from service.db.engine import Database
from service.library import json_safe

BINARY_METRIC = {"kind": "binary", "baseline": 0.12, "mde": 0.02}
ARMS = {"control": "classic-button", "treatment": "large-button"}


@pytest.fixture
def store(sqlite_url: str):
    s = open_db(sqlite_url)
    yield s
    s.close()


@pytest.fixture
def client(store: Database):
    with app_client(store) as c:
        yield c


@pytest.fixture
def key(store: Database) -> dict[str, str]:
    return auth(usecases.create_key(store, "juniper-bakery", "tests")[1])


def create(client: TestClient, key: dict, **over) -> dict:
    body = {
        "name": "checkout button",
        "arms": ARMS,
        "design": {"looks": 5, "metric": BINARY_METRIC},
    }
    body.update(over)
    r = client.post("/v1/experiments", json=body, headers=key)
    assert r.status_code == 201, r.text
    return r.json()


def look(client: TestClient, key: dict, exp_id: str, c: tuple, t: tuple, **over):
    body = {
        "totals": {
            ARMS["control"]: {"n": c[0], "successes": c[1]},
            ARMS["treatment"]: {"n": t[0], "successes": t[1]},
        }
    }
    body.update(over)
    return client.post(f"/v1/experiments/{exp_id}/looks", json=body, headers=key)


def assert_error(r, status: int, *words: str) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/json")
    err = r.json()["error"]
    assert set(err) >= {"code", "message"} and err["message"]
    for w in words:
        assert w in err["message"], (w, err["message"])
    return err


# ----------------------------------------------------------------- health, schema


def test_health_needs_no_key(client: TestClient):
    r = client.get("/v1/health")
    assert r.status_code == 200
    assert r.json() == {
        "status": "ok", "database": "sqlite", "writable": True,
        "schema_version": migrations.LATEST,
        "version": seqtest.__version__,
    }


def test_openapi_lists_routes_with_examples(client: TestClient):
    schema = client.get("/openapi.json").json()
    paths = schema["paths"]
    assert set(paths) >= {
        "/v1/health", "/v1/experiments", "/v1/experiments/{experiment_id}",
        "/v1/experiments/{experiment_id}/looks",
        "/v1/experiments/{experiment_id}/looks/{number}",
        "/v1/experiments/{experiment_id}/amendments",
    }
    text = json.dumps(schema)
    assert "Juniper Street Bakery" in text and "large-button" in text
    post = paths["/v1/experiments/{experiment_id}/looks"]["post"]
    assert "binary" in post["requestBody"]["content"]["application/json"]["examples"]


# ----------------------------------------------------------------- auth and isolation


def test_missing_and_wrong_keys_get_401(client: TestClient, store: Database):
    err = assert_error(client.get("/v1/experiments"), 401, "Authorization: Bearer")
    assert err["code"] == "unauthorized"
    assert_error(client.get("/v1/experiments", headers=auth("sqt_nope")), 401, "not valid")
    assert_error(
        client.get("/v1/experiments", headers={"Authorization": "Basic abc"}), 401
    )
    record, token = usecases.create_key(store, "t2")
    assert client.get("/v1/experiments", headers=auth(token)).status_code == 200
    usecases.revoke_key(store, record.id)
    assert_error(client.get("/v1/experiments", headers=auth(token)), 401, "revoked")


def test_a_look_is_answered_in_a_fixed_order_key_then_body_then_experiment(
        client: TestClient, store: Database, key):
    """Posting a look checks the key first (401 before anything about the body or the
    experiment, so a caller without a valid key learns nothing), then the path and
    the body (422), then the experiment (404, 409); a revoked key is refused at
    once. The order is the service's contract (service/README.md)."""
    exp = create(client, key)
    bad_body = {"totals": 5}  # not a mapping of arms: the body check refuses it
    good = (1000, 100), (1000, 120)
    url = "/v1/experiments/{}/looks"
    for headers in ({}, auth("sqt_nope"), {"Authorization": "Basic abc"}):
        for exp_id in (exp["id"], "exp_" + "0" * 24, "bad id"):
            assert_error(client.post(url.format(exp_id), json=bad_body, headers=headers),
                         401)
        assert_error(look(client, headers, exp["id"], *good), 401)
    assert_error(client.post(url.format("bad id"), json=bad_body, headers=key), 422)
    assert_error(client.post(url.format("exp_" + "0" * 24), json=bad_body, headers=key),
                 422)
    assert_error(look(client, key, "exp_" + "0" * 24, *good), 404)
    assert look(client, key, exp["id"], *good).status_code == 201
    record, token = usecases.create_key(store, "juniper-bakery", "soon revoked")
    assert look(client, auth(token), exp["id"], (2000, 200), (2000, 240)).status_code == 201
    usecases.revoke_key(store, record.id)
    assert_error(look(client, auth(token), exp["id"], (3000, 300), (3000, 360)), 401,
                 "revoked")


def test_a_team_sees_only_its_own_experiments(client: TestClient, store: Database, key):
    other = auth(usecases.create_key(store, "another-shop")[1])
    exp = create(client, key)
    for r in (
        client.get(f"/v1/experiments/{exp['id']}", headers=other),
        look(client, other, exp["id"], (100, 10), (100, 12)),
        client.post(f"/v1/experiments/{exp['id']}/amendments", headers=other,
                    json={"reason": "x", "design": {"looks": 3}}),
        client.get(f"/v1/experiments/{exp['id']}/looks/1", headers=other),
    ):
        assert_error(r, 404, exp["id"])
    assert client.get("/v1/experiments", headers=other).json()["total"] == 0
    assert client.get("/v1/experiments", headers=key).json()["total"] == 1


# ----------------------------------------------------------------- creating


def test_created_plan_has_the_published_boundary_table(client: TestClient, key):
    # Lan-DeMets O'Brien-Fleming-type spending, K = 5, two-sided 0.05:
    # 4.877, 3.357, 2.680, 2.290, 2.031 (DeMets & Lan 1994, via REFERENCES.md).
    exp = create(client, key, design={"looks": 5, "efficacy": "obrien-fleming-type",
                                      "metric": BINARY_METRIC})
    table = exp["plan"]["boundaries"]
    assert [row["look"] for row in table] == [1, 2, 3, 4, 5]
    assert [row["information_fraction"] for row in table] == pytest.approx(
        [0.2, 0.4, 0.6, 0.8, 1.0])
    assert [row["efficacy_z"] for row in table] == pytest.approx(
        [4.877, 3.357, 2.680, 2.290, 2.031], abs=6e-4)
    assert exp["state"] == "planned" and exp["looks"] == 0 and exp["metric"] == "binary"
    assert exp["arms"] == ARMS


def test_create_from_a_plan_document_stores_it_unchanged(client: TestClient, key):
    doc = seqtest.design(looks=3, efficacy="pocock-type", metric=BINARY_METRIC).to_dict()
    exp = create(client, key, design=None, plan=doc)
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert got["plan"]["document"] == json_safe(doc)
    assert got["plan"]["source"] == {"from": "document"}


@pytest.mark.parametrize(
    "body, status, words",
    [
        ({"name": "x", "metric": "binary", "max_n": 100}, 422, ["exactly one of"]),
        ({"name": "x", "metric": "binary", "plan": {}, "design": {}}, 422, ["exactly one of"]),
        ({"name": "x", "design": {"alpha": 2, "metric": BINARY_METRIC}}, 422, ["alpha"]),
        ({"name": "x", "design": {"looks": 0, "metric": BINARY_METRIC}}, 422, ["looks"]),
        ({"name": "x", "metric": "binary", "plan": {"kind": "group_sequential"}}, 422,
         ["plan"]),
        ({"name": "x", "metric": "binary", "plan": {"kind": "horoscope"}}, 422, ["kind"]),
        ({"name": "x", "metric": "rate", "design": {"metric": BINARY_METRIC}}, 422,
         ["metric", "binary"]),
        ({"name": "x", "metric": "binary", "design": {"looks": 3}}, 422, ["max_n"]),
        ({"name": "x", "design": {"looks": 3}, "max_n": 1000}, 422, ["metric"]),
        ({"name": "x", "metric": "binary", "design": {"looks": 3, "tau2": 1}, "max_n": 10},
         422, ["tau2"]),
        ({"name": "x", "metric": "binary", "max_n": 10, "arms": {"control": "a",
          "treatment": "a"}, "design": {}}, 422, ["two different names"]),
        ({"name": "x", "metric": "coins", "design": {}, "max_n": 10}, 422, ["metric"]),
        ({"name": "", "metric": "binary", "design": {}, "max_n": 10}, 422, ["name"]),
        ({"name": "x", "metric": "binary", "design": {}, "max_n": 10, "colour": "red"}, 422,
         ["colour"]),
    ],
)
def test_bad_creations_say_what_to_fix(client: TestClient, key, body, status, words):
    assert_error(client.post("/v1/experiments", json=body, headers=key), status, *words)


def test_plan_without_metric_uses_max_n(client: TestClient, key):
    exp = create(client, key, design={"looks": 4}, metric="binary", max_n=4000)
    r = look(client, key, exp["id"], (500, 60), (500, 66))
    assert r.status_code == 201, r.text
    assert r.json()["result"]["information_fraction"] == pytest.approx(0.25)


# ----------------------------------------------------------------- looks


def test_look_answer_is_the_monitors_analysis(client: TestClient, key):
    """The service is a thin shell: its answer equals the library's own analysis."""
    exp = create(client, key)
    history = []
    for c, t in [((1000, 120), (1000, 131)), ((2100, 250), (2080, 280))]:
        r = look(client, key, exp["id"], c, t)
        assert r.status_code == 201, r.text
        history.append({"control": {"n": c[0], "successes": c[1]},
                         "treatment": {"n": t[0], "successes": t[1]}})
        plan = seqtest.plan_from_dict(exp["plan"]["document"])
        expected = json_safe(
            seqtest.analyze(plan, history, metric="binary", allocation=1.0).to_dict())
        body = r.json()
        assert body["analysis"] == expected
        assert body["look"] == len(history)
        assert body["decision"] == expected["decision"]
        assert body["result"] == expected["looks"][-1]
        assert body["totals"] == {ARMS["control"]: {"n": c[0], "successes": c[1]},
                                  ARMS["treatment"]: {"n": t[0], "successes": t[1]}}
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert [lk["look"] for lk in got["looks_recorded"]] == [1, 2]
    assert got["current"] == body["analysis"]
    assert got["decision"] == body["decision"] and got["state"] == "running"
    one = client.get(f"/v1/experiments/{exp['id']}/looks/1", headers=key)
    assert one.status_code == 200 and one.json()["look"] == 1
    assert_error(client.get(f"/v1/experiments/{exp['id']}/looks/3", headers=key), 404,
                 "no look 3")


def test_clear_effect_stops_and_later_looks_are_refused(client: TestClient, key):
    # 10% vs 30% conversion with 1000 per arm gives z near 11.5, far beyond the
    # first O'Brien-Fleming-type boundary (4.877 at t = 0.2; DeMets & Lan 1994).
    exp = create(client, key)
    r = look(client, key, exp["id"], (1000, 100), (1000, 300))
    assert r.status_code == 201, r.text
    body = r.json()
    assert body["decision"] == "stop_efficacy" and body["state"] == "stopped"
    assert body["analysis"]["direction"] == "treatment_better"
    assert_error(look(client, key, exp["id"], (1100, 110), (1100, 330)), 409, "no more looks")
    listed = client.get("/v1/experiments?state=stopped", headers=key).json()
    assert [e["id"] for e in listed["experiments"]] == [exp["id"]]
    assert client.get("/v1/experiments?state=running", headers=key).json()["total"] == 0


def test_final_look_completes(client: TestClient, key):
    exp = create(client, key)
    r = look(client, key, exp["id"], (1000, 120), (1000, 121), final=True)
    assert r.status_code == 201, r.text
    assert r.json()["state"] == "completed"
    assert r.json()["decision"] == "complete_not_significant"


@pytest.mark.parametrize(
    "totals, words, location",
    [
        ({"classic-button": {"n": 10, "successes": 1}, "blue-button": {"n": 1, "successes": 0}},
         ["unknown arm 'blue-button'"], ["body", "totals", "blue-button"]),
        ({"classic-button": {"n": 10, "successes": 1}}, ["'large-button' is missing"],
         ["body", "totals", "large-button"]),
        ({"classic-button": {"n": 10, "wins": 1}, "large-button": {"n": 10, "successes": 1}},
         ["classic-button.wins", "unknown field"], ["body", "totals", "classic-button", "wins"]),
        ({"classic-button": {"n": 10, "successes": 11}, "large-button": {"n": 10, "successes": 1}},
         ["classic-button.successes"], ["body", "totals", "classic-button", "successes"]),
        ({"classic-button": {"n": 10.5, "successes": 1}, "large-button": {"n": 10, "successes": 1}},
         ["classic-button.n", "whole"], ["body", "totals", "classic-button", "n"]),
    ],
)
def test_bad_totals_name_the_field(client: TestClient, key, totals, words, location):
    exp = create(client, key)
    r = client.post(f"/v1/experiments/{exp['id']}/looks", json={"totals": totals}, headers=key)
    err = assert_error(r, 422, *words)
    assert err["details"][0]["location"] == location


def test_totals_going_backwards_name_the_field(client: TestClient, key):
    exp = create(client, key)
    assert look(client, key, exp["id"], (1000, 120), (1000, 130)).status_code == 201
    r = look(client, key, exp["id"], (1200, 119), (1200, 150))
    err = assert_error(r, 422, "classic-button.successes", "backwards")
    assert err["details"][0]["field"] == "successes"
    assert err["details"][0]["arm"] == "classic-button"
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert got["looks"] == 1  # nothing stored


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "-Infinity", "1e999"])
def test_non_finite_numbers_are_refused(client: TestClient, key, literal):
    exp = create(client, key)
    raw = ('{"totals": {"classic-button": {"n": LITERAL, "successes": 1}, '
           '"large-button": {"n": 10, "successes": 1}}}').replace("LITERAL", literal)
    r = client.post(f"/v1/experiments/{exp['id']}/looks", content=raw,
                    headers={**key, "content-type": "application/json"})
    err = assert_error(r, 422, "finite")
    assert err["details"][0]["location"] == ["body", "totals", "classic-button", "n"]


def test_wrong_types_are_refused(client: TestClient, key):
    exp = create(client, key)
    for totals in ({"classic-button": {"n": "10"}}, {"classic-button": {"n": True}},
                   {"classic-button": [1, 2]}, "lots"):
        r = client.post(f"/v1/experiments/{exp['id']}/looks", json={"totals": totals},
                        headers=key)
        assert_error(r, 422, "body.totals")


@pytest.mark.parametrize("raw", ["{", "[]", "null", "\xff", ""])
def test_unreadable_bodies_get_json_errors(client: TestClient, key, raw):
    exp = create(client, key)
    r = client.post(f"/v1/experiments/{exp['id']}/looks", content=raw.encode("latin-1"),
                    headers={**key, "content-type": "application/json"})
    assert r.status_code in (400, 422), r.text
    assert r.json()["error"]["message"]


def test_oversized_bodies_get_413(store: Database, key):
    app = create_app(db=store, max_body_bytes=2000)
    with TestClient(app) as client:
        big = {"name": "x" * 3000, "metric": "binary", "design": {}}
        err = assert_error(client.post("/v1/experiments", json=big, headers=key), 413, "2000")
        assert err["code"] == "payload_too_large"

        def chunks():  # no Content-Length: the limit is found while reading
            for _ in range(10):
                yield b" " * 500

        r = client.post("/v1/experiments", content=chunks(),
                        headers={**key, "content-type": "application/json"})
        assert_error(r, 413)


def test_unknown_routes_and_methods_get_json(client: TestClient, key):
    assert_error(client.get("/v1/nothing-here", headers=key), 404, "/docs")
    assert_error(client.delete("/v1/experiments", headers=key), 405, "DELETE")


def test_list_filters_and_pages(client: TestClient, key):
    ids = [create(client, key, name=f"test {i}")["id"] for i in range(3)]
    got = client.get("/v1/experiments?state=planned&limit=2", headers=key).json()
    assert got["total"] == 3 and len(got["experiments"]) == 2
    assert [e["id"] for e in got["experiments"]] == ids[::-1][:2]  # newest first
    rest = client.get("/v1/experiments?state=planned&limit=2&offset=2", headers=key).json()
    assert [e["id"] for e in rest["experiments"]] == [ids[0]]
    assert_error(client.get("/v1/experiments?state=paused", headers=key), 422, "state")
    assert_error(client.get("/v1/experiments?limit=0", headers=key), 422, "limit")


# ----------------------------------------------------------------- idempotency


def test_retry_with_the_same_key_returns_the_first_answer(client: TestClient, key):
    exp = create(client, key)
    body = {"totals": {ARMS["control"]: {"n": 1000, "successes": 120},
                       ARMS["treatment"]: {"n": 1000, "successes": 131}}}
    url = f"/v1/experiments/{exp['id']}/looks"
    h = {**key, "Idempotency-Key": "look-2024-05-01"}
    first = client.post(url, json=body, headers=h)
    second = client.post(url, json=body, headers=h)
    assert first.status_code == second.status_code == 201
    assert second.json() == first.json()
    assert second.headers.get("Seqtest-Replayed") == "true"
    assert "Seqtest-Replayed" not in first.headers
    assert client.get(f"/v1/experiments/{exp['id']}", headers=key).json()["looks"] == 1
    changed = {"totals": {ARMS["control"]: {"n": 1001, "successes": 120},
                          ARMS["treatment"]: {"n": 1000, "successes": 131}}}
    err = assert_error(client.post(url, json=changed, headers=h), 409, "different request")
    assert err["code"] == "idempotency_key_reused"
    # the same key on another route is another request too
    assert_error(client.post("/v1/experiments", headers=h,
                             json={"name": "x", "design": {"metric": BINARY_METRIC}}), 409)
    assert_error(client.post(url, json=body, headers={**key, "Idempotency-Key": "has space"}),
                 422, "Idempotency-Key")


def test_idempotent_creation(client: TestClient, key):
    h = {**key, "Idempotency-Key": "create-1"}
    body = {"name": "checkout", "design": {"metric": BINARY_METRIC}}
    a = client.post("/v1/experiments", json=body, headers=h)
    b = client.post("/v1/experiments", json=body, headers=h)
    assert a.status_code == b.status_code == 201 and a.json()["id"] == b.json()["id"]
    assert client.get("/v1/experiments", headers=key).json()["total"] == 1


def test_keys_of_different_teams_do_not_collide(client: TestClient, store: Database, key):
    other = auth(usecases.create_key(store, "another-shop")[1])
    body = {"name": "checkout", "design": {"metric": BINARY_METRIC}}
    a = client.post("/v1/experiments", json=body, headers={**key, "Idempotency-Key": "k"})
    b = client.post("/v1/experiments", json=body, headers={**other, "Idempotency-Key": "k"})
    assert a.status_code == b.status_code == 201 and a.json()["id"] != b.json()["id"]


# ----------------------------------------------------------------- amendments


def test_amendment_is_a_new_recorded_version(client: TestClient, key):
    exp = create(client, key)
    assert look(client, key, exp["id"], (1000, 120), (1000, 125)).status_code == 201
    r = client.post(
        f"/v1/experiments/{exp['id']}/amendments",
        json={"reason": "holiday week: one more look",
              "design": {"looks": 6, "metric": BINARY_METRIC}},
        headers=key,
    )
    assert r.status_code == 201, r.text
    amended = r.json()["plan"]
    assert amended["version"] == 2 and amended["after_look"] == 1
    assert amended["reason"] == "holiday week: one more look"
    assert len(amended["boundaries"]) == 6
    assert look(client, key, exp["id"], (2000, 240), (2000, 260)).status_code == 201
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert [p["version"] for p in got["plan_versions"]] == [1, 2]
    assert len(got["plan_versions"][0]["boundaries"]) == 5  # the first version is intact
    assert got["plan"]["version"] == 2 and got["plan_version"] == 2
    assert [lk["plan_version"] for lk in got["looks_recorded"]] == [1, 2]
    assert all(p["recorded_by"].startswith("key_") for p in got["plan_versions"])
    assert_error(client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                             json={"design": {"looks": 6}}), 422, "reason")
    assert_error(client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                             json={"reason": "x", "design": {"looks": 4, "metric": {
                                 "kind": "rate", "baseline": 1.0, "mde": 0.1}}}),
                 422, "metric")


def test_mixture_plan_is_monitored_by_the_library(client: TestClient, key):
    """A continuous-monitoring (mixture SPRT) plan designed from its inputs: no
    boundary table, and each look's answer equals the library's own analysis."""
    exp = create(client, key, design={"kind": "mixture", "alpha": 0.05,
                                      "metric": BINARY_METRIC})
    assert exp["plan"]["kind"] == "mixture" and exp["plan"]["boundaries"] is None
    r = look(client, key, exp["id"], (1000, 100), (1000, 130))
    assert r.status_code == 201, r.text
    plan = seqtest.plan_from_dict(exp["plan"]["document"])
    history = [{"control": {"n": 1000, "successes": 100},
                "treatment": {"n": 1000, "successes": 130}}]
    expected = json_safe(seqtest.analyze(plan, history, metric="binary",
                                         allocation=1.0).to_dict())
    assert r.json()["analysis"] == expected
    assert_error(client.post("/v1/experiments", headers=key, json={
        "name": "x", "design": {"kind": "mixture", "looks": 4, "metric": BINARY_METRIC}}),
        422, "looks", "mixture")
