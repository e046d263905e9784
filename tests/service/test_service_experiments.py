"""Experiments with many arms and several metrics through the HTTP API (in process).

The service is a door to the library: every number and decision it answers with is
checked against ``seqtest.analyze`` on the same looks (the library itself is checked
against published references in tests/test_experiment*.py). What is tested here is
the door: plans verified and stored, looks checked and located, answers complete and
consistent, nothing stored on a refusal, states after each decision.
"""

from __future__ import annotations

import copy
from typing import Any

import pytest
from fastapi.testclient import TestClient
from service_helpers import (
    EXPERIMENT_ARMS,
    app_client,
    auth,
    experiment_document,
    experiment_inputs,
)

import seqtest
from service import usecases
from service.db.engine import Database
from service.library import json_safe

CONTROL, ARM_A, ARM_B = EXPERIMENT_ARMS


@pytest.fixture(scope="module")
def document() -> dict:
    return experiment_document()


@pytest.fixture
def client(storage: Database):
    with app_client(storage) as c:
        yield c


@pytest.fixture
def key(storage: Database) -> dict[str, str]:
    return auth(usecases.create_key(storage, "millbrook-tea-room", "tests")[1])


def create(client: TestClient, key: dict, document: dict, **over: Any) -> dict:
    body = {"name": "basket button texts", "plan": document, **over}
    r = client.post("/v1/experiments", json=body, headers=key)
    assert r.status_code == 201, r.text
    return r.json()


def binary(n: int, s: int) -> dict:
    return {"n": n, "successes": s}


def nested(orders: dict[str, tuple[int, int]], refunds: dict[str, tuple[int, int]]) -> dict:
    return {"orders": {a: binary(*v) for a, v in orders.items()},
            "refunds": {a: binary(*v) for a, v in refunds.items()}}


def post(client: TestClient, key: dict, exp_id: str, totals: dict, **over: Any):
    return client.post(f"/v1/experiments/{exp_id}/looks", json={"totals": totals, **over},
                       headers=key)


def count(client: TestClient, key: dict) -> int:
    return client.get("/v1/experiments", headers=key).json()["total"]


def error(r: Any, status: int = 422) -> dict:
    assert r.status_code == status, r.text
    return r.json()["error"]


LOOK_1 = nested({CONTROL: (900, 90), ARM_A: (905, 101), ARM_B: (898, 92)},
                {CONTROL: (90, 5), ARM_A: (101, 5), ARM_B: (92, 4)})
LOOK_2 = nested({CONTROL: (1800, 181), ARM_A: (1810, 230), ARM_B: (1795, 185)},
                {CONTROL: (181, 9), ARM_A: (230, 11), ARM_B: (185, 9)})


# ----------------------------------------------------------------- create


def test_create_from_a_document_stores_what_it_verified(client, key, document):
    body = create(client, key, document)
    assert body["arms"] == list(EXPERIMENT_ARMS)
    assert body["metrics"] == [
        {"name": "orders", "role": "primary", "metric_kind": "binary"},
        {"name": "refunds", "role": "guardrail", "metric_kind": "binary"}]
    assert body["metric_kind"] == "binary" and body["allocations"] == {ARM_A: 1.0, ARM_B: 1.0}
    assert body["state"] == "planned" and body["plan"]["kind"] == "experiment"
    assert body["plan"]["document"] == document
    # the boundary table: one row per comparison and planned look, each with the
    # comparison's own boundaries as the library computed them
    plan = seqtest.plan_from_dict(document)
    rows = body["plan"]["boundaries"]
    assert len(rows) == len(plan.comparisons) * plan.looks
    for c in plan.comparisons:
        mine = [r for r in rows if (r["arm"], r["metric"]) == (c.arm, c.metric)]
        assert [r["role"] for r in mine] == [c.role] * plan.looks
        assert [r["efficacy_z"] for r in mine] == pytest.approx(list(c.plan.efficacy_z),
                                                                rel=1e-12)
        assert [r["n_treatment"] for r in mine] == [int(x) for x in plan.sizes[c.metric][c.arm]]
    got = client.get(f"/v1/experiments/{body['id']}", headers=key).json()
    assert got["arms"] == body["arms"] and got["metrics"] == body["metrics"]
    assert got["plan"]["boundaries"] == rows
    listed = client.get("/v1/experiments", headers=key).json()["experiments"]
    assert listed[0]["arms"] == list(EXPERIMENT_ARMS)


def test_create_from_design_inputs(client, key, document):
    inputs = experiment_inputs()
    body = create(client, key, None, plan=None, design={"kind": "experiment", **inputs})
    # the same inputs through the library give the same document
    assert body["plan"]["document"] == document
    assert body["plan"]["source"]["kind"] == "experiment"


def test_a_tampered_document_is_refused_naming_the_field(client, key, document):
    doc = copy.deepcopy(document)
    doc["computed"]["comparisons"][0]["efficacy_z"][1] += 0.01
    err = error(client.post("/v1/experiments", json={"name": "x", "plan": doc}, headers=key))
    assert err["code"] == "invalid_plan"
    assert err["details"][0]["location"] == ["body", "plan", "computed", "comparisons", 0,
                                             "efficacy_z", 1]
    assert count(client, key) == 0


@pytest.mark.parametrize("over, location", [
    ({"arms": {"control": "teapot", "treatment": ARM_A}}, ["body", "arms", "control"]),
    ({"arms": {"control": CONTROL, "treatment": ARM_A}}, ["body", "arms", "treatment"]),
    ({"arms": [CONTROL, ARM_B, ARM_A]}, ["body", "arms", 1]),
    ({"metric_kind": "rate"}, ["body", "metric_kind"]),
    ({"allocation": 2.0}, ["body", "allocation"]),
    ({"max_n": 5000}, ["body", "max_n"]),
    ({"fraction_basis": "information"}, ["body", "fraction_basis"]),
])
def test_request_fields_that_disagree_with_the_plan(client, key, document, over, location):
    r = client.post("/v1/experiments", json={"name": "x", "plan": document, **over},
                    headers=key)
    assert error(r)["details"][0]["location"] == location
    assert count(client, key) == 0


def test_request_fields_that_agree_with_the_plan(client, key, document):
    body = create(client, key, document, arms=list(EXPERIMENT_ARMS), metric_kind="binary",
                  allocation=1.0, fraction_basis="sample")
    assert body["arms"] == list(EXPERIMENT_ARMS)


def test_names_a_look_cannot_key_are_refused(client, key):
    doc = experiment_document(arms=["basket", "add to tray"])
    err = error(client.post("/v1/experiments", json={"name": "x", "plan": doc}, headers=key))
    assert err["details"][0]["location"] == ["body", "plan", "inputs", "arms", 1, "name"]


# ----------------------------------------------------------------- looks


def test_looks_match_the_library_and_read_back(client, key, document):
    exp = create(client, key, document)
    r1 = post(client, key, exp["id"], LOOK_1)
    assert r1.status_code == 201, r1.text
    r2 = post(client, key, exp["id"], LOOK_2)
    assert r2.status_code == 201, r2.text
    answer = r2.json()
    expected = json_safe(seqtest.analyze(document, [LOOK_1, LOOK_2]).to_dict())
    assert answer["analysis"] == expected
    assert answer["decision"] == expected["decision"]
    assert answer["totals"] == LOOK_2
    assert answer["analysis"]["caution"] == seqtest.CAUTION
    assert set(answer["result"]) == {f"{c['arm']}/{c['metric']}"
                                     for c in expected["comparisons"]}
    # reads: the look, the experiment (its analysis over the stored rows)
    assert client.get(f"/v1/experiments/{exp['id']}/looks/2", headers=key).json() == answer
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert got["analysis"] == expected and got["look_count"] == 2
    assert [lk["totals"] for lk in got["looks_recorded"]] == [LOOK_1, LOOK_2]
    first = client.get(f"/v1/experiments/{exp['id']}/looks/1", headers=key).json()
    assert first["analysis"] == json_safe(seqtest.analyze(document, [LOOK_1]).to_dict())
    # a page of looks: each comparison's rows are the page's
    paged = client.get(f"/v1/experiments/{exp['id']}?looks_offset=1&looks_limit=1",
                       headers=key).json()
    assert all([row["look"] for row in c["looks"]] == [2]
               for c in paged["analysis"]["comparisons"])


def test_one_metric_takes_totals_per_arm(client, key):
    doc = experiment_document(guardrail=False)
    exp = create(client, key, doc)
    look = {CONTROL: binary(900, 90), ARM_A: binary(905, 101), ARM_B: binary(898, 92)}
    r = post(client, key, exp["id"], look)
    assert r.status_code == 201, r.text
    assert r.json()["analysis"] == json_safe(seqtest.analyze(doc, [look]).to_dict())
    # and the per-metric form too
    look2 = {"orders": {CONTROL: binary(1800, 180), ARM_A: binary(1800, 199),
                        ARM_B: binary(1800, 185)}}
    r = post(client, key, exp["id"], look2)
    assert r.status_code == 201, r.text
    assert r.json()["analysis"] == json_safe(seqtest.analyze(doc, [look, look2]).to_dict())
    # a bad total of the flat form is located without the metric
    bad = {CONTROL: binary(2700, 270), ARM_A: binary(2700, 2701), ARM_B: binary(2700, 280)}
    err = error(post(client, key, exp["id"], bad))
    assert err["details"][0]["location"][:3] == ["body", "totals", ARM_A]


def _bad_looks() -> list[tuple[str, dict, list[Any]]]:
    ok = copy.deepcopy(LOOK_2)
    cases = []
    t = copy.deepcopy(ok)
    t["orders"]["teapot"] = binary(5, 1)
    cases.append(("unknown arm", t, ["body", "totals", "orders", "teapot"]))
    t = copy.deepcopy(ok)
    t["sales"] = t.pop("refunds")
    cases.append(("unknown metric", t, ["body", "totals", "sales"]))
    t = copy.deepcopy(ok)
    del t["refunds"][CONTROL]
    cases.append(("control missing", t, ["body", "totals", "refunds", CONTROL]))
    t = copy.deepcopy(ok)
    del t["orders"][ARM_B]
    cases.append(("running arm missing", t, ["body", "totals", "orders", ARM_B]))
    t = copy.deepcopy(ok)
    t["refunds"][ARM_A]["n"] = 50  # fewer orders than at look 1 (101)
    cases.append(("backwards", t, ["body", "totals", "refunds", ARM_A, "n"]))
    t = copy.deepcopy(ok)
    t["orders"][ARM_A]["successes"] = 5000
    cases.append(("more successes than units", t,
                  ["body", "totals", "orders", ARM_A, "successes"]))
    t = copy.deepcopy(ok)
    t["orders"] = {CONTROL: t["orders"][CONTROL], ARM_A: t["orders"][ARM_A]}
    t[ARM_B] = binary(1795, 185)
    cases.append(("arm at the top with several metrics", t, ["body", "totals", ARM_B]))
    t = copy.deepcopy(ok)
    t["orders"][ARM_A]["mean"] = 3
    cases.append(("a field that does not fit", t, ["body", "totals", "orders", ARM_A]))
    return cases


@pytest.mark.parametrize("what, totals, location", _bad_looks(),
                         ids=[c[0] for c in _bad_looks()])
def test_bad_totals_are_located_and_nothing_is_stored(client, key, document, what, totals,
                                                      location):
    exp = create(client, key, document)
    assert post(client, key, exp["id"], LOOK_1).status_code == 201
    err = error(post(client, key, exp["id"], totals))
    assert err["code"] == "invalid_totals", err
    assert err["details"][0]["location"][:len(location)] == location, err
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert got["look_count"] == 1


def test_library_refusals_name_the_metric(client, key, document):
    exp = create(client, key, document)
    assert post(client, key, exp["id"], LOOK_1).status_code == 201
    t = copy.deepcopy(LOOK_2)
    t["refunds"][ARM_A]["n"] = 50
    detail = error(post(client, key, exp["id"], t))["details"][0]
    assert (detail["look"], detail["arm"], detail["metric"], detail["field"]) == \
        (2, ARM_A, "refunds", "n")


def test_harm_stops_an_arm_and_the_experiment(client, key, document):
    exp = create(client, key, document)
    # add-to-tray doubles refunds, order-now lowers orders: the guardrail's harm boundary
    # (Pocock-type, one-sided 0.05: z about 2 at the first look) is crossed by add-to-tray
    look = nested({CONTROL: (900, 90), ARM_A: (900, 92), ARM_B: (900, 88)},
                  {CONTROL: (400, 20), ARM_A: (400, 48), ARM_B: (400, 19)})
    r = post(client, key, exp["id"], look)
    assert r.status_code == 201, r.text
    body = r.json()
    arms = {a["arm"]: a for a in body["analysis"]["arms"]}
    assert arms[ARM_A]["decision"] == "stop_harm" and arms[ARM_A]["stopped_at"] == 1
    assert arms[ARM_A]["harmed"] == ["refunds"]
    assert body["decision"] == "continue" and body["state"] == "running"
    # the stopped arm may still be posted (checked, not analysed) or left out
    look2 = nested({CONTROL: (1800, 181), ARM_B: (1800, 175)},
                   {CONTROL: (800, 41), ARM_B: (800, 40)})
    r = post(client, key, exp["id"], look2)
    assert r.status_code == 201, r.text
    assert "add-to-tray/refunds" not in r.json()["result"]
    # order-now ends at the final look: the experiment is over, with harm found
    look3 = nested({CONTROL: (2700, 270), ARM_B: (2700, 262)},
                   {CONTROL: (1200, 60), ARM_B: (1200, 61)})
    r = post(client, key, exp["id"], look3, final=True)
    assert r.status_code == 201, r.text
    body = r.json()
    assert body["state"] == "completed"
    assert body["analysis"]["reason"]["stop_harm"] == [ARM_A]
    assert body["analysis"]["reason_text"]
    assert error(post(client, key, exp["id"], look3), 409)["code"] == "experiment_closed"


def test_state_after_overall_decisions():
    from service.library import state_after
    # experiment plans: stop_harm is a stop; an arm's stop while others run is not
    assert state_after("stop_harm", False, False) == "stopped"
    assert state_after("stop_efficacy", False, False) == "stopped"
    assert state_after("stop_futility", False, False) == "running"
    assert state_after("stop_futility", False, True) == "stopped"
    assert state_after("continue", True, False) == "completed"
    assert state_after("complete_not_significant", False, False) == "completed"


def test_daily_traffic_does_not_apply(client, key, document):
    exp = create(client, key, document)
    err = error(post(client, key, exp["id"], LOOK_1, daily_traffic=500))
    assert err["details"][0]["location"] == ["body", "daily_traffic"]


# ----------------------------------------------------------------- amendments


def test_amendments_keep_arms_and_metrics_once_looks_exist(client, key, document):
    exp = create(client, key, document)
    url = f"/v1/experiments/{exp['id']}/amendments"
    # before the first look the arms may change
    r = client.post(url, json={"reason": "a fourth text", "design": {
        "arms": [*EXPERIMENT_ARMS, "tray-please"]}}, headers=key)
    assert r.status_code == 201, r.text
    got = client.get(f"/v1/experiments/{exp['id']}", headers=key).json()
    assert got["arms"] == [*EXPERIMENT_ARMS, "tray-please"]
    look = nested({CONTROL: (900, 90), ARM_A: (905, 101), ARM_B: (898, 92),
                   "tray-please": (900, 95)},
                  {CONTROL: (90, 5), ARM_A: (101, 5), ARM_B: (92, 4), "tray-please": (95, 5)})
    assert post(client, key, exp["id"], look).status_code == 201
    # once looks exist: arms and metrics stay
    err = error(client.post(url, json={"reason": "drop one", "design": {
        "arms": list(EXPERIMENT_ARMS)}}, headers=key))
    assert err["details"][0]["location"] == ["body", "design", "arms"]
    err = error(client.post(url, json={"reason": "other plan", "plan": document},
                            headers=key))
    assert err["details"][0]["location"] == ["body", "plan", "inputs", "arms"]
    # other inputs may change (one more look), verified like a create
    r = client.post(url, json={"reason": "one more look", "design": {"looks": 4}},
                    headers=key)
    assert r.status_code == 201, r.text
    assert r.json()["plan"]["document"]["inputs"]["information_fractions"] == \
        pytest.approx([0.25, 0.5, 0.75, 1.0])
    doc = copy.deepcopy(r.json()["plan"]["document"])
    doc["computed"]["comparisons"][0]["drift"] *= 1.01
    err = error(client.post(url, json={"reason": "tampered", "plan": doc}, headers=key))
    assert err["details"][0]["location"][:4] == ["body", "plan", "computed", "comparisons"]
    assert client.get(f"/v1/experiments/{exp['id']}", headers=key).json()["plan_version"] == 3


def test_an_amendment_keeps_the_kind_of_plan(client, key, document):
    two_arm = client.post("/v1/experiments", json={
        "name": "two arms", "design": {"looks": 3, "metric": {
            "kind": "binary", "baseline": 0.1, "mde": 0.03}}}, headers=key).json()
    err = error(client.post(f"/v1/experiments/{two_arm['id']}/amendments",
                            json={"reason": "more arms", "plan": document}, headers=key))
    assert err["details"][0]["location"] == ["body", "plan", "kind"]
    exp = create(client, key, document)
    err = error(client.post(f"/v1/experiments/{exp['id']}/amendments", json={
        "reason": "two arms", "design": {"kind": "group_sequential", "looks": 3, "metric": {
            "kind": "binary", "baseline": 0.1, "mde": 0.03}}}, headers=key))
    assert err["details"][0]["location"] == ["body", "design", "kind"]
    # with a max_n too: still the kind that is named (max_n applies to neither)
    err = error(client.post(f"/v1/experiments/{exp['id']}/amendments", json={
        "reason": "two arms", "max_n": 5000, "plan": two_arm["plan"]["document"]},
        headers=key))
    assert err["details"][0]["location"] == ["body", "plan", "kind"]
    err = error(client.post(f"/v1/experiments/{exp['id']}/amendments", json={
        "reason": "a cap", "max_n": 5000, "design": {"looks": 4}}, headers=key))
    assert err["details"][0]["location"] == ["body", "max_n"]


def test_the_documented_examples_work(client, key):
    """The OpenAPI examples (service/api/examples.py; service/README.md shows them)."""
    from service.api import examples
    r = client.post("/v1/experiments", json=examples.CREATE_EXPERIMENT_PLAN["value"],
                    headers=key)
    assert r.status_code == 201, r.text
    exp = r.json()
    r = client.post(f"/v1/experiments/{exp['id']}/looks",
                    json=examples.LOOK_EXPERIMENT["value"], headers=key)
    assert r.status_code == 201, r.text
    assert r.json()["arm_states"] == {"add-to-tray": "running", "order-now": "running"}
    schema = client.get("/openapi.json").json()
    create = schema["paths"]["/v1/experiments"]["post"]["requestBody"]["content"][
        "application/json"]["examples"]
    assert "experiment plan" in create


def test_impossible_sums_of_squares_are_located(client, key):
    doc = experiment_document(guardrail=False, kind="continuous")
    exp = create(client, key, doc)
    # sum_sq below sum^2 / n makes the variance negative: impossible together
    look = {CONTROL: {"n": 100, "sum": 1000, "sum_sq": 5000},
            ARM_A: {"n": 100, "sum": 1000, "sum_sq": 20000},
            ARM_B: {"n": 100, "sum": 1000, "sum_sq": 20000}}
    detail = error(post(client, key, exp["id"], look))["details"][0]
    assert detail["location"] == ["body", "totals", CONTROL, "sum_sq"]
    assert detail["metric"] == "order_value"
    assert client.get(f"/v1/experiments/{exp['id']}", headers=key).json()["look_count"] == 0


def test_a_zero_denominator_of_a_ratio_metric_is_located(client, key):
    exp = create(client, key, experiment_document(guardrail=False, kind="ratio"))
    good = {"n": 100, "numerator": 240.0, "denominator": 110.0, "numerator_sq": 980.0,
            "denominator_sq": 185.0, "cross": 390.0}
    bad = {**good, "denominator": 0.0, "denominator_sq": 0.0, "cross": 0.0}
    look = {CONTROL: good, ARM_A: good, ARM_B: bad}
    detail = error(post(client, key, exp["id"], look))["details"][0]
    assert detail["location"][:3] == ["body", "totals", ARM_B], detail
    assert detail["metric"] == "items_per_order" and detail["arm"] == ARM_B
    assert "denominator" in detail["message"], detail
    assert client.get(f"/v1/experiments/{exp['id']}", headers=key).json()["look_count"] == 0
    r = post(client, key, exp["id"], {CONTROL: good, ARM_A: good, ARM_B: good})
    assert r.status_code == 201, r.text
