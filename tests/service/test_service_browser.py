"""The pages in a real browser: headless Chromium from Debian's packages, driven by
Selenium, against a live ``python -m service serve`` on a temporary SQLite file (and
one test on PostgreSQL).

The browser is found at ``/usr/bin/chromium`` and ``/usr/bin/chromedriver`` (or on the
PATH; ``SEQTEST_CHROMIUM`` and ``SEQTEST_CHROMEDRIVER`` override). Without it (or
without the ``selenium`` package) these tests skip, except with ``CI=true``, where
they fail: ``.ci/run`` installs the browser. The browser is told to resolve no host
but this machine's, and the page tests also read its network log, so a page that
asked for anything from another host would fail them.

Screenshots go to ``out/screenshots/`` (kept out of git; ``SEQTEST_SCREENSHOTS``
overrides). What the pages show is checked against the JSON of the same experiment
(``GET /v1/experiments/{id}``), and the design page against ``seqtest.design``.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import sqlite3
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import httpx
import pytest
from pages_seed import BAKERY, Seeded, binary, seed
from service_helpers import REPO, Server, auth, new_key

import seqtest

IN_CI = os.environ.get("CI", "").strip().lower() == "true"
SHOTS = Path(os.environ.get("SEQTEST_SCREENSHOTS") or REPO / "out" / "screenshots")
PHONE = 390  # px: the width of a common phone, in CSS pixels


def _find(env: str, name: str) -> str | None:
    given = os.environ.get(env)
    if given:
        return given if os.access(given, os.X_OK) else None
    for path in (f"/usr/bin/{name}", shutil.which(name)):
        if path and os.access(path, os.X_OK):
            return path
    return None


def _browser_or_skip() -> tuple[str, str]:
    problems = []
    try:
        import selenium  # noqa: F401
    except ImportError:
        problems.append("the Python package selenium is not installed")
    chromium = _find("SEQTEST_CHROMIUM", "chromium")
    driver = _find("SEQTEST_CHROMEDRIVER", "chromedriver")
    if chromium is None:
        problems.append("chromium is not installed (apt-get install -y chromium)")
    if driver is None:
        problems.append("chromedriver is not installed (apt-get install -y chromium-driver)")
    if problems:
        message = "browser tests need a browser: " + "; ".join(problems)
        if IN_CI:
            pytest.fail(message + " (CI=true: the browser tests must run in CI)")
        pytest.skip(message)
    assert chromium is not None and driver is not None
    return chromium, driver


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    chromium, chromedriver = _browser_or_skip()
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    profile = tempfile.mkdtemp(prefix="seqtest-chromium-")
    options = webdriver.ChromeOptions()
    options.binary_location = chromium
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--window-size=1100,900",
                 f"--user-data-dir={profile}",
                 # no host but this machine's can even be resolved
                 "--host-resolver-rules=MAP * ~NOTFOUND , EXCLUDE 127.0.0.1"):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"performance": "ALL"})
    driver = webdriver.Chrome(service=Service(chromedriver), options=options)
    driver.set_page_load_timeout(30)
    driver.get("about:blank")
    try:
        yield driver
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[Server, Seeded, Path]]:
    folder = tmp_path_factory.mktemp("pages")
    path = folder / "seqtest.db"
    url = f"sqlite:///{path}"
    srv = Server(url, folder / "server.log").start()
    try:
        yield srv, seed(srv.base_url, url), path
    finally:
        srv.stop()


# --------------------------------------------------------------------------- helpers


def shot(driver: Any, name: str) -> Path:
    """A screenshot of the whole page (up to 6000 px tall) in the screenshots folder."""
    SHOTS.mkdir(parents=True, exist_ok=True)
    size = driver.execute_cdp_cmd("Page.getLayoutMetrics", {})["cssContentSize"]
    width = math.ceil(size["width"])
    height = min(6000, math.ceil(size["height"]))
    png = driver.execute_cdp_cmd("Page.captureScreenshot", {
        "format": "png", "captureBeyondViewport": True,
        "clip": {"x": 0, "y": 0, "width": width, "height": height, "scale": 1}})["data"]
    import base64

    out = SHOTS / f"{name}.png"
    out.write_bytes(base64.b64decode(png))
    return out


def requests_seen(driver: Any) -> list[str]:
    """URLs the browser asked for since the last call (from its network log)."""
    urls = []
    for entry in driver.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg.get("method") == "Network.requestWillBeSent":
            urls.append(msg["params"]["request"]["url"])
    return urls


def assert_only_this_machine(urls: list[str]) -> None:
    """No request went over the network to another host (the browser's own chrome://
    pages, data: and file: URLs are not network requests)."""
    outside = [u for u in urls if urlsplit(u).scheme in ("http", "https", "ws", "wss", "ftp")
               and urlsplit(u).hostname not in ("127.0.0.1", "localhost")]
    assert not outside, f"requests left the machine: {outside}"


def forget_cookies(driver: Any) -> None:
    """Every cookie of every site gone (WebDriver's own call clears only the current
    page's site)."""
    driver.execute_cdp_cmd("Network.clearBrowserCookies", {})


def sign_in(driver: Any, base: str, key: str, *, start: str = "/") -> None:
    from selenium.webdriver.common.by import By

    driver.get(base + start)
    assert urlsplit(driver.current_url).path == "/signin"
    field = driver.find_element(By.ID, "key")
    field.clear()
    field.send_keys(key)
    field.submit()
    _wait_path_not(driver, "/signin")


def _wait_path_not(driver: Any, path: str, timeout: float = 10) -> None:
    deadline = time.monotonic() + timeout
    while urlsplit(driver.current_url).path == path and time.monotonic() < deadline:
        time.sleep(0.05)


def text(driver: Any, css: str) -> str:
    from selenium.webdriver.common.by import By

    return " ".join(driver.find_element(By.CSS_SELECTOR, css).text.split())


def table(driver: Any, css: str) -> tuple[list[str], list[list[str]]]:
    """A table's header cells and rows of cells, as the page shows them."""
    from selenium.webdriver.common.by import By

    t = driver.find_element(By.CSS_SELECTOR, css)
    head = [" ".join(th.text.split()) for th in t.find_elements(By.CSS_SELECTOR, "thead th")]
    rows = [[" ".join(td.get_attribute("textContent").split())
             for td in tr.find_elements(By.CSS_SELECTOR, "td")]
            for tr in t.find_elements(By.CSS_SELECTOR, "tbody tr")]
    return head, rows


def api(srv: Server, key: str, path: str) -> Any:
    r = httpx.get(srv.base_url + path, headers=auth(key), timeout=30)
    assert r.status_code == 200, r.text
    return r.json()


def close_to(cell: str, value: float, decimals: int) -> bool:
    """The page's rounded number is the JSON's number to the shown decimals."""
    return abs(float(cell.replace(",", "")) - value) <= 0.5 * 10 ** -decimals + 1e-12


def no_sideways_scroll(driver: Any) -> None:
    wide = driver.execute_script(
        "return [document.documentElement.scrollWidth, window.innerWidth]")
    assert wide[0] <= wide[1], f"the page is {wide[0]} px wide in a {wide[1]} px window"


# --------------------------------------------------------------------------- tests


def test_without_a_cookie_a_page_redirects_to_sign_in_and_back(browser: Any, live: Any):
    srv, s, _ = live
    forget_cookies(browser)
    target = f"/experiments/{s.ids['running']}"
    browser.get(srv.base_url + target)
    assert urlsplit(browser.current_url).path == "/signin"
    shot(browser, "sign-in")
    sign_in(browser, srv.base_url, s.bakery_key, start=target)
    assert urlsplit(browser.current_url).path == target  # back where the person was going
    cookie = browser.get_cookie("seqtest_session")
    assert cookie["httpOnly"] is True and cookie["sameSite"] == "Strict"
    assert s.bakery_key not in cookie["value"]  # the key itself never goes in the cookie
    assert_only_this_machine(requests_seen(browser))


def test_list_shows_the_teams_experiments_as_the_json_does(browser: Any, live: Any):
    srv, s, _ = live
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key)
    assert urlsplit(browser.current_url).path == "/experiments"
    listing = api(srv, s.bakery_key, "/v1/experiments")
    head, rows = table(browser, "#experiments")
    assert head[:5] == ["Experiment", "Metric", "State", "Decision", "Looks"]
    by_name = {r[0]: r for r in rows}
    assert sorted(by_name) == sorted(e["name"] for e in listing["experiments"])
    assert "Loyalty stamp card" not in by_name  # the other team's
    for e in listing["experiments"]:
        row = by_name[e["name"]]
        assert row[1] == e["metric_kind"] and row[2] == e["state"]
        assert row[4] == str(e["look_count"])
        words = seqtest.reporting.style.DECISION_WORDS
        assert row[3].startswith(words[e["decision"]] if e["decision"] else "-")
    # the warning mark: the arms of the upsell test did not split as planned
    srm = api(srv, s.bakery_key, f"/v1/experiments/{s.ids['srm']}")
    assert srm["analysis"]["sample_ratio_mismatch"] == [1]
    assert "sample ratio" in by_name["Gift-card upsell at checkout"][6]
    assert by_name["Larger Place-order button"][6] == "-"
    assert_only_this_machine(requests_seen(browser))
    shot(browser, "list")


def test_continuing_experiment_page_says_what_the_json_says(browser: Any, live: Any):
    srv, s, _ = live
    exp_id = s.ids["running"]
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key, start=f"/experiments/{exp_id}")
    body = api(srv, s.bakery_key, f"/v1/experiments/{exp_id}")
    analysis = body["analysis"]
    assert analysis["decision"] == "continue"
    # the decision sentence is the JSON's summary, word for word
    assert text(browser, "#summary") == " ".join(analysis["summary"].split())
    head, rows = table(browser, "#looks table")
    col = {h: i for i, h in enumerate(head)}
    assert [r[0] for r in rows] == ["1", "2"]
    for row, look in zip(rows, analysis["looks"], strict=True):
        assert close_to(row[col["z"]], look["z"], 2)
        assert close_to(row[col["efficacy z"]], look["efficacy_z"], 2)
        assert close_to(row[col["futility z"]], look["futility_z"], 2)
        assert row[col["users, control"]] == f"{look['n_control']:,.0f}"
        assert row[col["users, treatment"]] == f"{look['n_treatment']:,.0f}"
        assert close_to(row[col["effect (points)"]], 100 * look["estimate"], 2)
    # what lies ahead: users (and days) to the next look, from the projection
    ahead = text(browser, "#projection")
    proj = analysis["projection"]
    assert f"{math.ceil(proj['more_units_to_next_look'] - 1e-9):,} more users" in ahead
    assert f"about {proj['days_to_next_look']:.1f} day" in ahead  # 1.0 day, 2.9 days
    # both charts, with the planned boundaries drawn dashed
    assert browser.find_elements("css selector", "#z-chart svg .planned-efficacy")
    assert len(browser.find_elements("css selector", "#z-chart svg .z-point")) == 2
    assert browser.find_elements("css selector", "#effect-chart svg")
    # the plan in force: its table of looks with users per arm, as stored
    _, plan_rows = table(browser, "#plan-table table")
    assert [r[2] for r in plan_rows] == [f"{b['n_control']:,}"
                                         for b in body["plan"]["boundaries"]]
    assert_only_this_machine(requests_seen(browser))
    shot(browser, "experiment-continuing")


def test_stopped_experiment_page_shows_the_adjusted_inference_and_the_versions(
        browser: Any, live: Any):
    srv, s, _ = live
    exp_id = s.ids["stopped"]
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key, start=f"/experiments/{exp_id}")
    body = api(srv, s.bakery_key, f"/v1/experiments/{exp_id}")
    analysis, fin = body["analysis"], body["analysis"]["final"]
    assert analysis["decision"] == "stop_efficacy" and body["state"] == "stopped"
    assert text(browser, "#summary") == " ".join(analysis["summary"].split())
    assert text(browser, "#summary").startswith("Stop at look 3: the treatment is better.")
    assert "stop for efficacy (treatment better)" in text(browser, "#decision-words")
    head, rows = table(browser, ".comparison .seqtest-scroll table")  # the first: at the stop
    assert head[1] == "adjusted for the looks"
    cells = {r[0]: r for r in rows}
    lo, hi = cells["interval (points)"][1].split(" to ")
    assert close_to(lo, 100 * fin["ci_lower"], 1) and close_to(hi, 100 * fin["ci_upper"], 1)
    # the amendment: who recorded it, after which look, and why
    _, versions = table(browser, "#versions")
    assert [v[0] for v in versions] == ["1 (group-sequential)", "2 (group-sequential)"]
    assert versions[1][2].startswith("analyst laptop (key_")
    assert versions[1][3] == "after look 1"
    assert versions[1][4] == "Holiday traffic doubled: five looks instead of four"
    assert versions[1][5] == "looks: 4 → 5"
    assert body["plan_versions"][1]["reason"] == versions[1][4]
    assert_only_this_machine(requests_seen(browser))
    shot(browser, "experiment-stopped-efficacy")


def test_planned_experiment_page_shows_the_plan_before_any_look(browser: Any, live: Any):
    srv, s, _ = live
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key, start=f"/experiments/{s.ids['planned']}")
    assert "No look yet" in text(browser, "#no-looks")
    assert "Plan: 4 look(s), two-sided alpha 0.05" in text(browser, "#plan-summary")


def test_design_form_shows_the_librarys_message_then_the_plan(browser: Any, live: Any):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    srv, s, _ = live
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key, start="/design")

    def fill(**values: str) -> None:
        for name, value in values.items():
            el = browser.find_element(By.ID, name)
            if el.tag_name == "select":
                Select(el).select_by_value(value)
            else:
                el.clear()
                el.send_keys(value)
        browser.find_element(By.CSS_SELECTOR, "form.grid button").click()
        time.sleep(0.05)

    fill(alpha="1.5", looks="4", baseline="0.12", mde="0.02")
    with pytest.raises(ValueError) as refused:
        seqtest.design(alpha=1.5, sides=2, power=0.9, looks=4,
                       metric={"kind": "binary", "baseline": 0.12, "mde": 0.02})
    assert text(browser, "#alpha-error") == str(refused.value)  # the library's words
    assert browser.find_element(By.ID, "alpha").get_attribute("aria-invalid") == "true"
    assert browser.find_element(By.ID, "alpha").get_attribute("value") == "1.5"  # kept
    assert not browser.find_elements(By.ID, "plan-table")
    shot(browser, "design-error")
    fill(alpha="0.05")
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=4,
                          metric={"kind": "binary", "baseline": 0.12, "mde": 0.02})
    ss = plan.sample_size()
    head, rows = table(browser, "#plan-table table")
    assert head[2:4] == ["users, control", "users, treatment"]
    assert [r[2] for r in rows] == [f"{int(n):,}" for n in ss.per_look_control]
    assert [r[4] for r in rows] == [f"{z:.3f}" for z in plan.efficacy_z]
    expected = text(browser, "#expected")
    assert f"{math.ceil(ss.expected_null - 1e-9):,}" in expected
    assert f"{math.ceil(ss.expected_alternative - 1e-9):,}" in expected
    assert_only_this_machine(requests_seen(browser))
    shot(browser, "design")


def test_another_teams_experiment_is_not_found(browser: Any, live: Any):
    srv, s, _ = live
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key)
    other = f"/experiments/{s.ids['other_team']}"
    browser.get(srv.base_url + other)
    assert "Not found" in text(browser, "h1")
    assert "Loyalty stamp card" not in browser.page_source
    # the same answer as for an experiment that does not exist, with status 404
    cookie = browser.get_cookie("seqtest_session")["value"]
    jar = {"seqtest_session": cookie}
    r = httpx.get(srv.base_url + other, cookies=jar)
    assert r.status_code == 404 and "text/html" in r.headers["content-type"]
    assert httpx.get(srv.base_url + "/experiments/exp_000000000000000000000000",
                     cookies=jar).status_code == 404
    # and the other team sees its own
    assert httpx.get(srv.base_url + f"/v1/experiments/{s.ids['other_team']}",
                     headers=auth(s.cafe_key)).status_code == 200


def test_forged_and_expired_cookies_go_back_to_sign_in(browser: Any, live: Any):
    from service.web.session import COOKIE, SECRET_NAME, Signer

    srv, s, db_path = live
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key)
    good = browser.get_cookie(COOKIE)["value"]
    version, payload, mac = good.split(".")
    # forged: the payload changed (another team's id), the signature kept
    forged = payload[:-2] + ("AA" if payload[-2:] != "AA" else "BB")
    for value in (f"{version}.{forged}.{mac}", "v1.e30.bm90LWEtc2lnbmF0dXJl", "garbage"):
        forget_cookies(browser)
        browser.get(srv.base_url + "/signin")
        browser.add_cookie({"name": COOKIE, "value": value, "path": "/"})
        browser.get(srv.base_url + "/experiments")
        assert urlsplit(browser.current_url).path == "/signin"
        assert browser.get_cookie(COOKIE) is None  # cleared
    # expired: signed with the service's own secret, but issued 9 hours ago (8 h life)
    with sqlite3.connect(db_path) as conn:
        secret = conn.execute("SELECT value FROM service_secrets WHERE name = ?",
                              (SECRET_NAME,)).fetchone()[0]
    session = Signer(secret, 8 * 3600).read(good)
    old = Signer(secret, 8 * 3600).issue(session.key_id, session.team_id,
                                         now=time.time() - 9 * 3600)
    forget_cookies(browser)
    browser.add_cookie({"name": COOKIE, "value": old, "path": "/"})
    browser.get(srv.base_url + f"/experiments/{s.ids['running']}")
    assert urlsplit(browser.current_url).path == "/signin"
    assert "expired" in text(browser, ".notice")
    # and the same secret's fresh cookie is good: only the expiry refused it
    fresh = Signer(secret, 8 * 3600).issue(session.key_id, session.team_id)
    browser.add_cookie({"name": COOKIE, "value": fresh, "path": "/"})
    browser.get(srv.base_url + "/experiments")
    assert urlsplit(browser.current_url).path == "/experiments"


def test_sign_out_ends_the_session(browser: Any, live: Any):
    from selenium.webdriver.common.by import By

    srv, s, _ = live
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key)
    browser.find_element(By.CSS_SELECTOR, "form.signout button").click()
    _wait_path_not(browser, "/experiments")
    assert urlsplit(browser.current_url).path == "/signin"
    assert "signed out" in text(browser, ".notice")
    assert browser.get_cookie("seqtest_session") is None
    browser.get(srv.base_url + "/experiments")
    assert urlsplit(browser.current_url).path == "/signin"


def test_pages_read_well_at_a_phones_width(browser: Any, live: Any):
    srv, s, _ = live
    forget_cookies(browser)
    browser.set_window_size(PHONE, 844)
    try:
        assert browser.execute_script("return window.innerWidth") == PHONE
        sign_in(browser, srv.base_url, s.bakery_key)
        for path, name in ((f"/experiments/{s.ids['stopped']}", "phone-experiment"),
                           ("/design?alpha=2", "phone-design-error"),
                           ("/experiments", "phone-list")):
            browser.get(srv.base_url + path)
            no_sideways_scroll(browser)
            shot(browser, name)
        # the list becomes one card per experiment, each field with its label
        shown = browser.execute_script(
            "const td = document.querySelector('#experiments td[data-label=State]');"
            "return [getComputedStyle(td).display, getComputedStyle(td, '::before').content]")
        assert shown == ["block", '"State: "']
    finally:
        browser.set_window_size(1100, 900)


def test_experiment_plan_page_shows_the_arms_and_comparisons_of_the_json(
        browser: Any, live: Any):
    from selenium.webdriver.common.by import By
    from service_helpers import EXPERIMENT_ARMS, experiment_document
    srv, s, _ = live
    control, tray, now = EXPERIMENT_ARMS
    r = httpx.post(srv.base_url + "/v1/experiments", headers=auth(s.bakery_key), timeout=60,
                   json={"name": "Basket button texts", "plan": experiment_document()})
    assert r.status_code == 201, r.text
    exp_id = r.json()["id"]
    # refunds 12% against 5% at 400 orders: add-to-tray crosses the harm boundary
    look = {"orders": {control: {"n": 900, "successes": 90},
                       tray: {"n": 900, "successes": 92}, now: {"n": 900, "successes": 88}},
            "refunds": {control: {"n": 400, "successes": 20},
                        tray: {"n": 400, "successes": 48}, now: {"n": 400, "successes": 19}}}
    r = httpx.post(srv.base_url + f"/v1/experiments/{exp_id}/looks", timeout=60,
                   headers=auth(s.bakery_key), json={"totals": look})
    assert r.status_code == 201, r.text
    data = api(srv, s.bakery_key, f"/v1/experiments/{exp_id}")
    forget_cookies(browser)
    sign_in(browser, srv.base_url, s.bakery_key, start=f"/experiments/{exp_id}")
    rows = browser.find_elements(By.CSS_SELECTOR, "#arms tbody tr")
    shown = {r.find_element(By.CSS_SELECTOR, "td.name").text:
             r.find_element(By.CSS_SELECTOR, "td[data-label=State]").text for r in rows}
    assert shown == data["arm_states"] == {tray: "stopped", now: "running"}
    comps = browser.find_elements(By.CSS_SELECTOR, "#comparisons tbody tr")
    assert len(comps) == len(data["analysis"]["comparisons"]) == 4
    assert data["analysis"]["reason_text"] in browser.find_element(By.ID, "summary").text
    shot(browser, "experiment-plan")
    browser.set_window_size(PHONE, 844)
    try:
        browser.get(srv.base_url + f"/experiments/{exp_id}")
        no_sideways_scroll(browser)
        shot(browser, "phone-experiment-plan")
    finally:
        browser.set_window_size(1100, 900)


def test_api_page_loads_from_this_machine_alone(browser: Any, live: Any):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    srv, _, _ = live
    requests_seen(browser)  # forget earlier requests
    browser.get(srv.base_url + "/docs")
    WebDriverWait(browser, 20).until(
        ec.presence_of_element_located((By.CSS_SELECTOR, ".swagger-ui .opblock")))
    paths = {" ".join(e.text.split()) for e in
             browser.find_elements(By.CSS_SELECTOR, ".opblock-summary-path")}
    assert "/v1/experiments/{experiment_id}/looks" in paths
    urls = requests_seen(browser)
    assert any(u.endswith("/openapi.json") for u in urls)
    assert any(u.endswith("/docs/assets/swagger-ui-bundle.js") for u in urls)
    assert_only_this_machine(urls)
    shot(browser, "api-docs")


def test_the_report_of_seqtest_report_loads_nothing_from_outside(
        browser: Any, live: Any, tmp_path: Path):
    srv, s, _ = live
    body = api(srv, s.bakery_key, f"/v1/experiments/{s.ids['stopped']}")
    plan_file = tmp_path / "plan.json"
    plan_file.write_text(json.dumps(body["plan"]["document"]))
    looks = tmp_path / "free-delivery-banner.csv"
    lines = ["look,control_n,control_successes,treatment_n,treatment_successes"]
    for lk in body["looks_recorded"]:
        c, t = lk["totals"]["banner-off"], lk["totals"]["banner-on"]
        lines.append(f"{lk['look']},{c['n']},{c['successes']},{t['n']},{t['successes']}")
    looks.write_text("\n".join(lines) + "\n")
    page = tmp_path / "report.html"
    run = subprocess.run([sys.executable, "-m", "seqtest", "report", str(looks), "--plan",
                          str(plan_file), "--html", str(page), "--title",
                          "Free-delivery banner"], capture_output=True, text=True,
                         cwd=REPO, timeout=120)
    assert page.exists(), run.stderr
    requests_seen(browser)
    browser.get(page.as_uri())
    # the report and the page say the same thing of the same looks
    assert text(browser, ".seqtest-decision") == " ".join(body["analysis"]["summary"].split())
    assert_only_this_machine(requests_seen(browser))
    shot(browser, "report")


def test_an_unexpected_error_is_a_page_without_a_trace(browser: Any, live: Any):
    """A damaged record (an experiment whose plan version is missing) makes the page
    fail inside: the person gets a page with the request id, the log gets the trace."""
    srv, s, db_path = live
    key = new_key(f"sqlite:///{db_path}", "ember-lane-books")
    team_id = httpx.get(srv.base_url + "/v1/experiments", headers=auth(key)).json()
    assert team_id["total"] == 0
    with sqlite3.connect(db_path) as conn:
        team = conn.execute("SELECT id FROM teams WHERE name = 'ember-lane-books'").fetchone()
        key_id = conn.execute("SELECT id FROM api_keys WHERE team_id = ?", team).fetchone()
        conn.execute(
            "INSERT INTO experiments (id, team_id, name, description, metric, control_arm, "
            "treatment_arm, allocation, max_n, fraction, plan_version, look_count, state, "
            "decision, created_at, created_by, updated_at) VALUES ('exp_damaged', ?, "
            "'Damaged record', '', 'binary', 'a', 'b', 1, NULL, NULL, 7, 0, 'planned', NULL, "
            "'2026-01-01T00:00:00.000000Z', ?, '2026-01-01T00:00:00.000000Z')",
            (team[0], key_id[0]))
    forget_cookies(browser)
    sign_in(browser, srv.base_url, key, start="/experiments/exp_damaged")
    assert text(browser, "h1") == "Something went wrong"
    rid = text(browser, "#request-id")
    page = browser.page_source
    for trace in ("Traceback", 'File "', "NoResultFound", "sqlalchemy", "line "):
        assert trace not in page
    assert rid in srv.log_file.read_text()  # the log has it, with the trace
    assert "Traceback" in srv.log_file.read_text()
    cookie = {"seqtest_session": browser.get_cookie("seqtest_session")["value"]}
    assert httpx.get(srv.base_url + "/experiments/exp_damaged",
                     cookies=cookie).status_code == 500


@pytest.mark.postgres
def test_pages_on_postgresql(browser: Any, postgres_url: str, tmp_path: Path):
    srv = Server(postgres_url, tmp_path / "server.log").start()
    try:
        key = new_key(postgres_url, BAKERY, "analyst laptop")
        arms = ("classic", "large")
        created = httpx.post(srv.base_url + "/v1/experiments", headers=auth(key), json={
            "name": "Larger Place-order button", "metric_kind": "binary",
            "arms": {"control": arms[0], "treatment": arms[1]},
            "design": {"looks": 3, "metric": {"kind": "binary", "baseline": 0.08,
                                              "mde": 0.016}}}, timeout=30).json()
        n = created["plan"]["boundaries"][0]["n_control"]
        r = httpx.post(srv.base_url + f"/v1/experiments/{created['id']}/looks",
                       headers=auth(key), timeout=30,
                       json={"totals": binary(arms, (n, n), (0.080, 0.092))})
        assert r.status_code == 201, r.text
        forget_cookies(browser)
        sign_in(browser, srv.base_url, key, start=f"/experiments/{created['id']}")
        body = api(srv, key, f"/v1/experiments/{created['id']}")
        assert text(browser, "#summary") == " ".join(body["analysis"]["summary"].split())
        # the signing secret is kept in the database: a sign-in outlives a restart
        srv.stop()
        srv.start()
        browser.get(srv.base_url + f"/experiments/{created['id']}")
        assert urlsplit(browser.current_url).path == f"/experiments/{created['id']}"
        assert text(browser, "#summary") == " ".join(body["analysis"]["summary"].split())
    finally:
        srv.stop()


def test_browser_suite_leaves_screenshots_out_of_git():
    if not (REPO / ".git").exists() or not str(SHOTS).startswith(str(REPO)):
        pytest.skip("the screenshots are not saved inside a git work tree")
    ignored = subprocess.run(["git", "check-ignore", "-q", str(SHOTS / "list.png")],
                             cwd=REPO)
    assert ignored.returncode == 0, f"{SHOTS} is not ignored by git"
