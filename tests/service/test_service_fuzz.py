"""Property-based fuzzing of request bodies: no request, however malformed,
gets a 5xx, and every error is a JSON body with a message.

Bodies are drawn three ways: arbitrary JSON (including NaN and Infinity,
which Python's encoder writes as bare words), arbitrary bytes, and bodies of
the right shape with hostile values (huge, tiny, negative, fractional,
non-finite numbers; unknown arms and fields), so that requests get past the
schema and reach the library.
"""

from __future__ import annotations

import json
from urllib.parse import quote

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from service_helpers import app_client, auth, open_db

from service import usecases

SETTINGS = settings(
    max_examples=100,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    derandomize=True,  # a fixed, reproducible set of examples
)

METRICS = {
    "binary": {"kind": "binary", "baseline": 0.1, "mde": 0.02},
    "continuous": {"kind": "continuous", "sd": 5.0, "mde": 1.0},
    "rate": {"kind": "rate", "baseline": 0.5, "mde": 0.05},
}
FIELDS = ["n", "successes", "sum", "sum_sq", "mean", "sd", "exposure", "events", "x", ""]
ARMS = ["control", "treatment", "other", "", "a b"]

numbers = st.one_of(
    st.integers(min_value=-(10**20), max_value=10**20),
    st.integers(min_value=0, max_value=5000),
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=0, max_value=1e6),
    st.sampled_from([0, 1, 2, 1e-300, 1e300, 1.7e308, -1e308, 10**400, 0.5]),
)
json_values = st.recursive(
    st.none() | st.booleans() | numbers | st.text(max_size=20),
    lambda inner: st.lists(inner, max_size=4)
    | st.dictionaries(st.text(max_size=10), inner, max_size=4),
    max_leaves=20,
)
totals = st.dictionaries(
    st.sampled_from(ARMS) | st.text(max_size=8),
    st.dictionaries(st.sampled_from(FIELDS), numbers | json_values, max_size=4)
    | json_values,
    max_size=3,
)
look_bodies = st.fixed_dictionaries(
    {"totals": totals},
    optional={"final": st.booleans() | json_values, "daily_traffic": numbers,
              "extra": json_values},
)
design_bodies = st.fixed_dictionaries(
    {},
    optional={
        "alpha": numbers, "sides": numbers, "power": numbers, "looks": numbers,
        "info_fractions": st.lists(numbers, max_size=6) | json_values,
        "efficacy": st.sampled_from(["pocock", "obrien-fleming-type", "hsd:-4", "power:x",
                                     "wang-tsiatis", "?"]) | json_values,
        "futility": st.sampled_from(["pocock-type", "obrien-fleming", None]) | json_values,
        "binding": st.booleans() | json_values,
        "metric": st.sampled_from(list(METRICS.values())) | json_values,
        "kind": st.sampled_from(["group_sequential", "mixture", "x"]),
        "mde": numbers, "tau2": numbers, "max_n_per_arm": numbers,
    },
)
create_bodies = st.fixed_dictionaries(
    {"name": st.text(max_size=5) | json_values},
    optional={
        "metric": st.sampled_from(list(METRICS) + ["x"]) | json_values,
        "design": design_bodies | json_values,
        "plan": json_values,
        "arms": st.fixed_dictionaries({}, optional={"control": st.sampled_from(ARMS),
                                                   "treatment": st.sampled_from(ARMS)}),
        "allocation": numbers,
        "max_n": numbers,
        "fraction": st.sampled_from(["sample", "information", "x"]),
    },
)


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    store = open_db(f"sqlite:///{tmp_path_factory.mktemp('fuzz') / 'fuzz.db'}")
    key = auth(usecases.create_key(store, "fuzzers")[1])
    client = app_client(store)
    experiments = {}
    for kind, metric in METRICS.items():
        r = client.post("/v1/experiments", headers=key, json={
            "name": kind, "design": {"looks": 4, "metric": metric}})
        assert r.status_code == 201, r.text
        experiments[kind] = r.json()["id"]
    yield client, key, experiments
    client.close()
    store.close()


def _check(r) -> None:
    assert r.status_code < 500, (r.status_code, r.text)
    if r.status_code >= 400:
        err = r.json()["error"]
        assert isinstance(err["message"], str) and err["message"]


def _post(client, key, url, body) -> None:
    # json.dumps writes NaN/Infinity as bare words, as a careless client would
    raw = json.dumps(body, allow_nan=True)
    _check(client.post(url, content=raw, headers={**key, "content-type": "application/json"}))


@SETTINGS
@given(kind=st.sampled_from(list(METRICS)), body=look_bodies)
def test_look_bodies_never_get_5xx(world, kind, body):
    client, key, experiments = world
    _post(client, key, f"/v1/experiments/{experiments[kind]}/looks", body)


@st.composite
def arm_totals(draw, kind: str) -> dict:
    """Totals of one arm: usually plausible, sometimes hostile in one field."""
    n = draw(st.integers(min_value=1, max_value=20000))
    if kind == "binary":
        out = {"n": n, "successes": draw(st.integers(min_value=0, max_value=n))}
    elif kind == "rate":
        out = {"exposure": draw(st.floats(min_value=1e-3, max_value=1e6)),
               "events": draw(st.integers(min_value=0, max_value=10**6))}
    else:
        mean = draw(st.floats(min_value=-1e4, max_value=1e4))
        sd = draw(st.floats(min_value=0, max_value=1e3))
        out = {"n": n, "sum": n * mean, "sum_sq": (n - 1) * sd * sd + n * mean * mean}
    if draw(st.booleans()):
        out[draw(st.sampled_from(sorted(out)))] = draw(numbers)
    return out


@SETTINGS
@given(data=st.data(), kind=st.sampled_from(list(METRICS)),
       count=st.integers(min_value=1, max_value=3))
def test_well_shaped_totals_never_get_5xx(world, data, kind, count):
    """Right arms and fields, plausible or hostile values: these reach the library.
    Each example gets a fresh experiment and one to three looks."""
    client, key, _ = world
    r = client.post("/v1/experiments", headers=key, json={
        "name": kind, "design": {"looks": 3, "metric": METRICS[kind]}})
    exp_id = r.json()["id"]
    for _ in range(count):
        body = {"totals": {"control": data.draw(arm_totals(kind)),
                           "treatment": data.draw(arm_totals(kind))},
                "final": data.draw(st.booleans())}
        _post(client, key, f"/v1/experiments/{exp_id}/looks", body)


@SETTINGS
@given(body=create_bodies)
def test_create_bodies_never_get_5xx(world, body):
    client, key, _ = world
    _post(client, key, "/v1/experiments", body)


@SETTINGS
@given(body=st.fixed_dictionaries({}, optional={"reason": st.text(max_size=5) | json_values,
                                                "design": design_bodies | json_values,
                                                "plan": json_values}))
def test_amendment_bodies_never_get_5xx(world, body):
    client, key, experiments = world
    r = client.post("/v1/experiments", headers=key, json={
        "name": "to amend", "design": {"looks": 3, "metric": METRICS["binary"]}})
    _post(client, key, f"/v1/experiments/{r.json()['id']}/amendments", body)


@SETTINGS
@given(raw=st.binary(max_size=300), route=st.sampled_from(["/v1/experiments", "looks",
                                                            "amendments"]),
       content_type=st.sampled_from(["application/json", "text/plain", "", "application/x"]))
def test_arbitrary_bytes_never_get_5xx(world, raw, route, content_type):
    client, key, experiments = world
    url = route if route.startswith("/") else f"/v1/experiments/{experiments['binary']}/{route}"
    headers = dict(key)
    if content_type:
        headers["content-type"] = content_type
    _check(client.post(url, content=raw, headers=headers))


@SETTINGS
@given(path=st.text(max_size=30), query=st.text(max_size=30))
def test_arbitrary_paths_and_queries_never_get_5xx(world, path, query):
    client, key, _ = world
    _check(client.get("/v1/experiments/" + quote(path, safe=""), headers=key))
    _check(client.get("/v1/experiments", params={"state": query, "limit": query},
                      headers=key))
