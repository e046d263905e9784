"""Invented experiments for the page tests, posted through the API of a live server.

Juniper Street Bakery (an invented shop) tests its checkout; Copper Kettle Cafe (also
invented) is a second team whose experiment the first must not reach. The totals are
written out (no randomness): the efficacy stop at the third look is what
``seqtest.analyze`` decides for them, checked where they are used.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import httpx
from service_helpers import auth, new_key

BAKERY = "juniper-bakery"
CAFE = "copper-kettle-cafe"


@dataclass
class Seeded:
    bakery_key: str
    cafe_key: str
    ids: dict[str, str] = field(default_factory=dict)


def _create(client: httpx.Client, key: str, body: dict[str, Any]) -> dict[str, Any]:
    r = client.post("/v1/experiments", headers=auth(key), json=body)
    assert r.status_code == 201, r.text
    return r.json()


def _look(client: httpx.Client, key: str, exp_id: str, totals: dict[str, Any],
          daily: float | None = None) -> dict[str, Any]:
    body: dict[str, Any] = {"totals": totals}
    if daily is not None:
        body["daily_traffic"] = daily
    r = client.post(f"/v1/experiments/{exp_id}/looks", headers=auth(key), json=body)
    assert r.status_code == 201, r.text
    return r.json()


def binary(arms: tuple[str, str], n: tuple[int, int], rates: tuple[float, float]
           ) -> dict[str, Any]:
    return {arms[0]: {"n": n[0], "successes": round(n[0] * rates[0])},
            arms[1]: {"n": n[1], "successes": round(n[1] * rates[1])}}


def seed(base_url: str, database_url: str) -> Seeded:
    s = Seeded(new_key(database_url, BAKERY, "analyst laptop"),
               new_key(database_url, CAFE, "cafe pipeline"))
    with httpx.Client(base_url=base_url, timeout=60) as c:
        # planned: no look yet
        e = _create(c, s.bakery_key, {
            "name": "Seasonal menu photos", "metric_kind": "continuous",
            "description": "Photos of the seasonal menu on the product pages.",
            "design": {"looks": 4, "metric": {"kind": "continuous", "baseline": 24.0,
                                              "sd": 11.0, "mde": 1.0}}})
        s.ids["planned"] = e["id"]
        # stopped for efficacy at look 3, after an amendment recorded after look 1
        arms = ("banner-off", "banner-on")
        e = _create(c, s.bakery_key, {
            "name": "Free-delivery banner", "metric_kind": "binary",
            "arms": {"control": arms[0], "treatment": arms[1]},
            "design": {"looks": 4, "metric": {"kind": "binary", "baseline": 0.10,
                                              "mde": 0.02}}})
        s.ids["stopped"] = e["id"]
        first = e["plan"]["boundaries"][0]["n_control"]
        _look(c, s.bakery_key, e["id"], binary(arms, (first, first), (0.100, 0.118)))
        r = c.post(f"/v1/experiments/{e['id']}/amendments", headers=auth(s.bakery_key),
                   json={"reason": "Holiday traffic doubled: five looks instead of four",
                         "design": {"looks": 5}})
        assert r.status_code == 201, r.text
        sizes = [b["n_control"] for b in r.json()["plan"]["boundaries"]]
        for k, (rc, rt) in enumerate([(0.101, 0.124), (0.099, 0.127)], start=2):
            last = _look(c, s.bakery_key, e["id"],
                         binary(arms, (sizes[k - 1], sizes[k - 1]), (rc, rt)))
        assert last["decision"] == "stop_efficacy", last["analysis"]["summary"]
        # arms that did not split as planned (a sample-ratio mismatch), continuing
        arms = ("no-upsell", "upsell")
        e = _create(c, s.bakery_key, {
            "name": "Gift-card upsell at checkout", "metric_kind": "binary",
            "arms": {"control": arms[0], "treatment": arms[1]},
            "design": {"looks": 5, "metric": {"kind": "binary", "baseline": 0.05,
                                              "mde": 0.01}}})
        s.ids["srm"] = e["id"]
        _look(c, s.bakery_key, e["id"], binary(arms, (5200, 4700), (0.050, 0.052)))
        # continuing, with daily traffic for the projection in days
        arms = ("classic", "large")
        e = _create(c, s.bakery_key, {
            "name": "Larger Place-order button", "metric_kind": "binary",
            "description": "A larger 'Place order' button on the checkout page.",
            "arms": {"control": arms[0], "treatment": arms[1]},
            "design": {"looks": 5, "futility": "obrien-fleming-type",
                       "metric": {"kind": "binary", "baseline": 0.08, "mde": 0.016}}})
        s.ids["running"] = e["id"]
        sizes = [b["n_control"] for b in e["plan"]["boundaries"]]
        _look(c, s.bakery_key, e["id"], binary(arms, (sizes[0], sizes[0] + 12),
                                               (0.081, 0.089)), daily=3000)
        _look(c, s.bakery_key, e["id"], binary(arms, (sizes[1], sizes[1] + 20),
                                               (0.080, 0.091)), daily=3000)
        # the other team's
        e = _create(c, s.cafe_key, {
            "name": "Loyalty stamp card", "metric_kind": "binary",
            "design": {"looks": 3, "metric": {"kind": "binary", "baseline": 0.2,
                                              "mde": 0.04}}})
        s.ids["other_team"] = e["id"]
    return s
