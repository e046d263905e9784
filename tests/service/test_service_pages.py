"""The pages in process (no browser): sessions, sign-in, forms, errors, the API page's
assets. What a person sees in a real browser is in ``test_service_browser.py``.

The session rules checked here are facts of the trade (common practice for web
sessions): a signed cookie whose expiry is inside the signature, HttpOnly and
SameSite=Strict, never the credential itself in the cookie, a sign-in that only
returns to the same site, and form posts refused from another origin.
"""

from __future__ import annotations

import html
import math
import re
import time
from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient
from service_helpers import EXPERIMENT_ARMS, app_client, auth, experiment_document, open_db

import seqtest
from service import usecases
from service.api import create_app
from service.config import Settings
from service.db.engine import Database
from service.web import data as page_data
from service.web.pages import safe_next
from service.web.session import COOKIE, SECRET_NAME, BadCookie, Signer, signing_secret

SECRET = "s" * 40


@pytest.fixture
def app_db(database_url: str) -> Iterator[Database]:
    db = open_db(database_url)
    try:
        yield db
    finally:
        db.close()


@pytest.fixture
def client(app_db: Database) -> Iterator[TestClient]:
    with app_client(app_db) as c:
        yield c


def _key(db: Database, team: str = "juniper-bakery", label: str = "analyst") -> str:
    return usecases.create_key(db, team, label)[1]


def _signed_in(client: TestClient, key: str) -> None:
    r = client.post("/signin", data={"key": key, "next": "/experiments"},
                    follow_redirects=False)
    assert r.status_code == 303, r.text
    assert r.headers["location"] == "/experiments"


def _experiment(client: TestClient, key: str, **extra: Any) -> dict[str, Any]:
    body = {"name": "Larger Place-order button", "metric_kind": "binary",
            "design": {"looks": 4, "metric": {"kind": "binary", "baseline": 0.08,
                                              "mde": 0.016}}}
    body.update(extra)
    r = client.post("/v1/experiments", headers=auth(key), json=body)
    assert r.status_code == 201, r.text
    return r.json()


# --------------------------------------------------------------------------- the cookie


def test_signed_cookie_round_trip_and_every_kind_of_refusal():
    signer = Signer(SECRET, 3600)
    t = 1_800_000_000.0
    cookie = signer.issue("key_1", "team_1", now=t)
    s = signer.read(cookie, now=t + 10)
    assert (s.key_id, s.team_id, s.expires_at - s.issued_at) == ("key_1", "team_1", 3600)
    version, payload, mac = cookie.split(".")
    refused = {
        "changed payload": f"{version}.{payload[:-1]}{'A' if payload[-1] != 'A' else 'B'}.{mac}",
        "changed signature": f"{version}.{payload}.{mac[:-1]}{'A' if mac[-1] != 'A' else 'B'}",
        "other version": f"v2.{payload}.{mac}",
        "no signature": f"{version}.{payload}",
        "not base64": f"{version}.%%%.{mac}",
        "another secret": Signer("t" * 40, 3600).issue("key_1", "team_1", now=t),
        "too long": f"{version}.{'A' * 3000}.{mac}",
    }
    for why, value in refused.items():
        with pytest.raises(BadCookie) as exc:
            signer.read(value, now=t + 10)
        assert not exc.value.expired, why
    with pytest.raises(BadCookie) as exc:  # the expiry is inside the signed payload
        signer.read(cookie, now=t + 3600)
    assert exc.value.expired
    with pytest.raises(BadCookie):  # issued more than the clock skew in the future
        signer.read(signer.issue("key_1", "team_1", now=t + 3600), now=t)
    with pytest.raises(ValueError, match="at least 32"):
        Signer("short", 60)


def test_the_signing_secret_is_made_once_and_shared_by_every_process(database_url: str):
    first, second = open_db(database_url), open_db(database_url)
    try:
        a = signing_secret(first, "")
        assert len(a) >= 64 and signing_secret(second, "") == a  # another process, same
        with first.read() as conn:
            from service.db import site

            assert site.secret(conn, SECRET_NAME) == a
        assert signing_secret(first, SECRET) == SECRET  # the configured one wins
    finally:
        first.close()
        second.close()


def test_a_configured_secret_must_be_long_enough():
    with pytest.raises(ValueError, match="session_secret.*at least 32"):
        Settings.from_env({"session_secret": "too-short"})
    with pytest.raises(ValueError, match="SEQTEST_SESSION_SECRET"):
        Settings.from_env(env={"SEQTEST_SESSION_SECRET": "x" * 31})
    assert SECRET not in repr(Settings.from_env({"session_secret": SECRET}))


def test_a_cookie_signed_with_the_configured_secret_is_read(app_db: Database):
    key = _key(app_db)
    settings = app_db.settings.with_(session_secret=SECRET)
    with TestClient(create_app(db=app_db, settings=settings)) as c:
        principal = usecases.authenticate(app_db, key)
        assert principal is not None
        c.cookies.set(COOKIE, Signer(SECRET, 60).issue(principal.key_id, principal.team_id))
        assert c.get("/experiments", follow_redirects=False).status_code == 200


# --------------------------------------------------------------------------- sign-in


def test_sign_in_sets_a_strict_http_only_cookie_without_the_key(
        client: TestClient, app_db: Database):
    key = _key(app_db)
    r = client.post("/signin", data={"key": key}, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/experiments"
    set_cookie = r.headers["set-cookie"]
    assert set_cookie.startswith(f"{COOKIE}=v1.")
    for attribute in ("HttpOnly", "SameSite=strict", "Path=/", "Max-Age=28800"):
        assert attribute.lower() in set_cookie.lower()
    assert "secure" not in set_cookie.lower()  # plain http: a Secure cookie would be lost
    assert key not in set_cookie
    assert r.headers["cache-control"] == "no-store"
    https = TestClient(client.app, base_url="https://testserver")
    r = https.post("/signin", data={"key": key}, follow_redirects=False)
    assert "; secure" in r.headers["set-cookie"].lower()


def test_a_wrong_key_shows_the_form_again(client: TestClient):
    r = client.post("/signin", data={"key": "sqt_not-a-key"}, follow_redirects=False)
    assert r.status_code == 401 and "set-cookie" not in r.headers
    assert "That key is not valid" in r.text and 'id="key"' in r.text
    r = client.post("/signin", data={"key": ""}, follow_redirects=False)
    assert r.status_code == 422 and "Type the team" in r.text


def test_home_goes_to_the_list_or_to_sign_in(client: TestClient, app_db: Database):
    r = client.get("/", follow_redirects=False)
    assert (r.status_code, r.headers["location"]) == (303, "/signin")
    _signed_in(client, _key(app_db))
    r = client.get("/", follow_redirects=False)
    assert (r.status_code, r.headers["location"]) == (303, "/experiments")


def test_a_revoked_key_ends_its_sessions_at_the_next_page(client: TestClient,
                                                         app_db: Database):
    key = _key(app_db)
    _signed_in(client, key)
    assert client.get("/experiments", follow_redirects=False).status_code == 200
    principal = usecases.authenticate(app_db, key)
    assert principal is not None
    usecases.revoke_key(app_db, principal.key_id)
    r = client.get("/experiments", follow_redirects=False)
    assert r.status_code == 303
    assert r.headers["location"] == "/signin?why=revoked"  # the list is where it goes
    assert f'{COOKIE}=""' in r.headers["set-cookie"]  # cleared


@pytest.mark.parametrize("value, expected", [
    ("/experiments/exp_1?x=1", "/experiments/exp_1?x=1"),
    ("/design?alpha=0.05", "/design?alpha=0.05"),
    ("//elsewhere.example/x", "/experiments"),
    ("https://elsewhere.example/", "/experiments"),
    ("/\\elsewhere.example", "/experiments"),
    ("javascript:alert(1)", "/experiments"),
    ("/signout", "/experiments"),
    ("", "/experiments"),
    (None, "/experiments"),
])
def test_sign_in_returns_only_to_this_service(value: str | None, expected: str):
    assert safe_next(value) == expected


def test_form_posts_from_another_site_are_refused(client: TestClient, app_db: Database):
    key = _key(app_db)
    for headers in ({"Origin": "http://elsewhere.example"},
                    {"Sec-Fetch-Site": "cross-site"}):
        r = client.post("/signin", data={"key": key}, headers=headers,
                        follow_redirects=False)
        assert r.status_code == 403 and "text/html" in r.headers["content-type"]
        assert "set-cookie" not in r.headers
    r = client.post("/signin", data={"key": key}, follow_redirects=False,
                    headers={"Origin": "http://testserver", "Sec-Fetch-Site": "same-origin"})
    assert r.status_code == 303


def test_forms_are_form_encoded_and_the_api_stays_json(client: TestClient, app_db: Database):
    key = _key(app_db)
    r = client.post("/signin", json={"key": key}, follow_redirects=False)
    assert r.status_code == 415 and "text/html" in r.headers["content-type"]
    assert "application/x-www-form-urlencoded" in r.text
    r = client.post("/v1/experiments", headers=auth(key), data={"name": "x"})
    assert r.status_code == 415 and r.json()["error"]["code"] == "unsupported_media_type"
    r = client.post("/signin", content=b"key=" + b"k" * 70_000,
                    headers={"Content-Type": "application/x-www-form-urlencoded"})
    assert r.status_code == 413 and "text/html" in r.headers["content-type"]


def test_sign_out_clears_the_cookie(client: TestClient, app_db: Database):
    _signed_in(client, _key(app_db))
    r = client.post("/signout", follow_redirects=False)
    assert (r.status_code, r.headers["location"]) == (303, "/signin?why=signedout")
    assert f'{COOKIE}=""' in r.headers["set-cookie"]
    assert client.get("/experiments", follow_redirects=False).status_code == 303


# --------------------------------------------------------------------------- errors


def test_an_unexpected_error_is_a_page_with_the_request_id_and_no_trace(
        client: TestClient, app_db: Database, monkeypatch: pytest.MonkeyPatch,
        caplog: pytest.LogCaptureFixture):
    key = _key(app_db)
    exp = _experiment(client, key)
    _signed_in(client, key)

    def broken(*_: Any, **__: Any) -> Any:
        raise RuntimeError("internal detail /srv/seqtest/db.py")

    monkeypatch.setattr(page_data, "experiment", broken)
    r = client.get(f"/experiments/{exp['id']}")
    assert r.status_code == 500 and r.headers["content-type"].startswith("text/html")
    assert r.headers["connection"] == "close"
    rid = r.headers["seqtest-request-id"]
    assert rid in r.text and "Something went wrong" in r.text
    for leak in ("Traceback", "RuntimeError", "internal detail", "db.py"):
        assert leak not in r.text
    assert any(rid in rec.getMessage() and "Traceback" in rec.getMessage()
               for rec in caplog.records)  # the log has it all


def test_errors_are_pages_for_browsers_and_json_for_the_api(client: TestClient,
                                                           app_db: Database):
    wants = {"Accept": "text/html,application/xhtml+xml"}
    r = client.get("/no-such-page", headers=wants)
    assert r.status_code == 404 and "<!DOCTYPE html>" in r.text
    assert client.get("/no-such-page").json()["error"]["code"] == "not_found"
    assert client.get("/v1/no-such-route", headers=wants).json()["error"]["code"] == \
        "not_found"
    key = _key(app_db)
    _signed_in(client, key)
    r = client.get("/experiments/exp_nope", headers=wants)
    assert r.status_code == 404
    assert "There is no experiment 'exp_nope' for your team" in html.unescape(r.text)
    r = client.get("/experiments?offset=-1", headers=wants)
    assert r.status_code == 422 and "offset" in r.text and "<!DOCTYPE html>" in r.text


def test_pages_say_what_they_load(client: TestClient, app_db: Database):
    _signed_in(client, _key(app_db))
    for path in ("/signin", "/experiments", "/design"):
        r = client.get(path)
        assert r.status_code == 200, path
        csp = r.headers["content-security-policy"]
        assert "default-src 'none'" in csp and "script-src" not in csp
        assert r.headers["cache-control"] == "no-store"
        assert r.headers["x-content-type-options"] == "nosniff"
        assert "<script" not in r.text
        assert not re.search(r'(src|href)="(https?:)?//', r.text), path


def test_names_and_reasons_are_escaped(client: TestClient, app_db: Database):
    key = _key(app_db)
    exp = _experiment(client, key, name="<script>alert(1)</script> & co",
                      description='"><img src=x onerror=alert(2)>')
    _signed_in(client, key)
    for path in ("/experiments", f"/experiments/{exp['id']}"):
        text = client.get(path).text
        assert "<script>alert(1)" not in text and "<img src=x" not in text
        assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; co" in text


# --------------------------------------------------------------------------- pages


def test_the_list_pages_through_the_teams_experiments(client: TestClient, app_db: Database):
    key = _key(app_db)
    other = _key(app_db, "copper-kettle-cafe")
    doc = _experiment(client, key)["plan"]["document"]
    for k in range(page_data.LIST_PAGE + 2):
        r = client.post("/v1/experiments", headers=auth(key), json={
            "name": f"Banner variant {k:02d}", "metric_kind": "binary", "plan": doc})
        assert r.status_code == 201
    _experiment(client, other, name="Loyalty stamp card")
    _signed_in(client, key)
    first = client.get("/experiments").text
    assert first.count('<tr data-id="') == page_data.LIST_PAGE
    assert "Banner variant 51" in first and "Loyalty stamp card" not in first
    assert f'href="/experiments?offset={page_data.LIST_PAGE}"' in first
    second = client.get(f"/experiments?offset={page_data.LIST_PAGE}").text
    assert second.count('<tr data-id="') == 3 and "Larger Place-order button" in second
    planned = client.get("/experiments?state=planned").text
    assert "53 experiments planned" in planned
    assert "No experiments running yet" in client.get("/experiments?state=running").text


def test_a_mixture_plan_has_its_page_too(client: TestClient, app_db: Database):
    key = _key(app_db)
    exp = _experiment(client, key, name="Gift-card upsell", design={
        "kind": "mixture", "mde": 0.01, "max_n_per_arm": 40000,
        "metric": {"kind": "binary", "baseline": 0.05, "mde": 0.01}})
    for n, (a, b) in ((4000, (200, 236)), (9000, (450, 531))):
        r = client.post(f"/v1/experiments/{exp['id']}/looks", headers=auth(key), json={
            "totals": {"control": {"n": n, "successes": a},
                       "treatment": {"n": n, "successes": b}}})
        assert r.status_code == 201, r.text
    _signed_in(client, key)
    page = client.get(f"/experiments/{exp['id']}").text
    summary = client.get(f"/v1/experiments/{exp['id']}", headers=auth(key)).json()[
        "analysis"]["summary"]
    shown = re.search(r'id="summary"><span class="headline">(.*?)</span> (.*?)</p>', page,
                      re.S)
    assert shown is not None
    assert html.unescape(f"{shown.group(1)} {shown.group(2)}") == summary
    assert "Plan: mixture SPRT" in page and 'id="plan-table"' not in page
    assert page.count("<svg") == 2


def test_an_experiment_plan_has_its_page(client: TestClient, app_db: Database):
    key = _key(app_db)
    control, tray, now = EXPERIMENT_ARMS
    r = client.post("/v1/experiments", headers=auth(key), json={
        "name": "Basket button texts", "plan": experiment_document()})
    assert r.status_code == 201, r.text
    exp = r.json()
    _signed_in(client, key)
    page = client.get(f"/experiments/{exp['id']}")
    assert page.status_code == 200 and 'id="no-looks"' in page.text
    assert "Experiment plan: 2 treatment(s)" in page.text and 'id="plan-table"' in page.text
    # the guardrail is crossed by one arm at the first look (refunds 12% against 5%)
    look = {"orders": {control: {"n": 900, "successes": 90}, tray: {"n": 900, "successes": 92},
                       now: {"n": 900, "successes": 88}},
            "refunds": {control: {"n": 400, "successes": 20},
                        tray: {"n": 400, "successes": 48},
                        now: {"n": 400, "successes": 19}}}
    r = client.post(f"/v1/experiments/{exp['id']}/looks", headers=auth(key),
                    json={"totals": look})
    assert r.status_code == 201, r.text
    answer = r.json()
    page = client.get(f"/experiments/{exp['id']}")
    assert page.status_code == 200, page.text
    text = html.unescape(page.text)
    assert answer["analysis"]["reason_text"] in text
    arms = re.search(r'id="arms">(.*?)</table>', page.text, re.S)
    comps = re.search(r'id="comparisons">(.*?)</table>', page.text, re.S)
    assert arms is not None and comps is not None
    arm_rows = re.findall(r"<tr><td class=\"name\">(.*?)</td>.*?State\">(.*?)</td>",
                          arms.group(1), re.S)
    assert dict(arm_rows) == {tray: "stopped", now: "running"}
    assert answer["arm_states"] == {tray: "stopped", now: "running"}
    comp_rows = re.findall(r'<tr><td class="name">(.*?)</td><td data-label="Metric">(.*?)'
                           r'</td>.*?data-label="z">(.*?)</td>', comps.group(1), re.S)
    z = {(c["arm"], c["metric"]): c["looks"][-1]["z"]
         for c in answer["analysis"]["comparisons"]}
    assert {(a, m): float(v) for a, m, v in comp_rows} == pytest.approx(
        {k: round(v, 2) for k, v in z.items()}, abs=0.006)
    assert seqtest.CAUTION in text
    listing = client.get("/experiments")
    assert listing.status_code == 200 and "Basket button texts" in listing.text


@pytest.mark.parametrize("query, field", [
    ({"alpha": "abc"}, "alpha"),
    ({"alpha": "0.9", "sides": "1"}, "alpha"),
    ({"power": "0.01"}, "power"),
    ({"looks": "0"}, "looks"),
    ({"looks": "2.5"}, "looks"),
    ({"fractions": "0.5, 0.4, 1"}, "fractions"),
    ({"efficacy": "no-such-spending"}, "efficacy"),
    ({"baseline": "1.5"}, "baseline"),
    ({"mde": "0.95"}, "mde"),
    ({"metric_kind": "continuous", "sd": "-1"}, "sd"),
    ({"allocation": "0"}, "allocation"),
])
def test_design_form_puts_each_message_next_to_its_field(
        client: TestClient, app_db: Database, query: dict[str, str], field: str):
    _signed_in(client, _key(app_db))
    form = {"alpha": "0.05", "sides": "2", "power": "0.9", "looks": "4",
            "efficacy": "obrien-fleming-type", "metric_kind": "binary", "baseline": "0.1",
            "mde": "0.02", "allocation": "1", **query}
    r = client.get("/design", params=form)
    assert r.status_code == 422
    messages = dict(re.findall(r'<span class="field-error" id="([a-z_]+)-error">(.*?)</span>',
                               r.text))
    assert list(messages) == [field]
    assert messages[field].startswith(("metric." + field if field in
                                       ("baseline", "mde", "sd", "allocation") else
                                       "information_fractions" if field == "fractions"
                                       else field) + ":")
    assert 'id="plan-table"' not in r.text


def test_design_form_message_is_the_librarys_own(client: TestClient, app_db: Database):
    """The words next to the field are those of seqtest.design for the same inputs."""
    _signed_in(client, _key(app_db))
    r = client.get("/design", params={"alpha": "0.05", "sides": "2", "power": "0.9",
                                      "looks": "4", "metric_kind": "binary",
                                      "baseline": "0.1", "mde": "0.95"})
    with pytest.raises(ValueError) as refused:
        seqtest.design(alpha=0.05, sides=2, power=0.9, looks=4,
                       metric={"kind": "binary", "baseline": 0.1, "mde": 0.95})
    shown = re.search(r'id="mde-error">(.*?)</span>', r.text)
    assert shown is not None and html.unescape(shown.group(1)) == str(refused.value)


def test_design_page_shows_the_table_and_the_expected_sizes(client: TestClient,
                                                           app_db: Database):
    _signed_in(client, _key(app_db))
    first = client.get("/design")
    assert first.status_code == 200 and 'id="plan-table"' not in first.text
    r = client.get("/design", params={"alpha": "0.05", "sides": "2", "power": "0.8",
                                      "fractions": "0.3, 0.6, 1", "futility":
                                      "obrien-fleming-type", "metric_kind": "continuous",
                                      "baseline": "24", "mde": "1", "sd": "11",
                                      "allocation": "1"})
    assert r.status_code == 200
    plan = seqtest.design(alpha=0.05, sides=2, power=0.8, information_fractions=[0.3, 0.6, 1],
                          futility="obrien-fleming-type",
                          metric={"kind": "continuous", "baseline": 24.0, "mde": 1.0,
                                  "sd": 11.0, "allocation": 1.0})
    ss = plan.sample_size()
    for n in ss.per_look_control:
        assert f"<td>{int(n):,}</td>" in r.text
    assert f"{ss.total:,}: control {ss.n_control:,}" in r.text
    assert f"{math.ceil(ss.expected_null - 1e-9):,} (" in r.text
    assert '"information_fractions": [' in html.unescape(r.text)  # the body to create it


def test_the_api_page_serves_its_own_three_assets(client: TestClient):
    r = client.get("/docs")
    assert r.status_code == 200
    refs = re.findall(r'(?:src|href)="([^"]+)"', r.text)
    assert sorted(refs) == ["/docs/assets/favicon-32x32.png", "/docs/assets/swagger-ui-bundle.js",
                            "/docs/assets/swagger-ui.css"]
    assert "url: '/openapi.json'" in r.text and '"validatorUrl": null' in r.text
    for name in ("swagger-ui-bundle.js", "swagger-ui.css", "favicon-32x32.png"):
        a = client.get(f"/docs/assets/{name}")
        assert a.status_code == 200 and len(a.content) > 500
        assert a.headers["cache-control"] == "public, max-age=86400"
    for name in ("swagger-ui-bundle.js.map", "index.html", "..%2F..%2F__init__.py"):
        assert client.get(f"/docs/assets/{name}").status_code == 404
    assert client.get("/redoc").status_code == 404  # it would load from the internet
    assert client.get("/openapi.json").json()["openapi"].startswith("3.1")


def test_pages_are_not_in_the_api_schema(client: TestClient):
    paths = client.get("/openapi.json").json()["paths"]
    assert all(p.startswith("/v1/") for p in paths)


def test_a_page_request_is_logged_with_its_team(client: TestClient, app_db: Database,
                                               caplog: pytest.LogCaptureFixture):
    _signed_in(client, _key(app_db))
    caplog.set_level("INFO", logger="seqtest.access")
    client.get("/experiments")
    lines = [r.getMessage() for r in caplog.records if r.name == "seqtest.access"]
    assert any('"GET /experiments HTTP' in ln and "team=juniper-bakery" in ln for ln in lines)


def test_a_session_past_its_max_age_is_refused(app_db: Database):
    key = _key(app_db)
    settings = app_db.settings.with_(session_max_age_s=60)
    app = create_app(db=app_db, settings=settings)
    with TestClient(app) as c:
        r = c.post("/signin", data={"key": key}, follow_redirects=False)
        assert "max-age=60" in r.headers["set-cookie"].lower()
        cookie = r.cookies[COOKIE]
        signer = app.state.session_signer
        assert signer.read(cookie).expires_at - signer.read(cookie).issued_at == 60
        with pytest.raises(BadCookie):
            signer.read(cookie, now=time.time() + 61)


def test_the_api_page_says_what_to_install_without_its_assets(
        client: TestClient, monkeypatch: pytest.MonkeyPatch):
    from service.api import docs

    monkeypatch.setattr(docs, "assets_dir", lambda: None)
    r = client.get("/docs")
    assert r.status_code == 503 and "swagger-ui-bundle-v2" in r.text
    assert "/openapi.json" in r.text and "<script" not in r.text
    assert client.get("/docs/assets/swagger-ui.css").status_code == 404
