"""The one-page report (HTML, Markdown), the notebook displays and the command line's
output of decisions: `seqtest analyze` and `seqtest report`.

The report must stand alone: no script, no stylesheet or image fetched from anywhere
(checked by parsing every tag's attributes with html.parser); the only URL in the page
is the SVG namespace name ``http://www.w3.org/2000/svg``, an identifier that the XML
namespaces recommendation says is not fetched. Its sentences and tables are the
library's (seqtest.reporting), read back out of the page.
"""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import pytest
from reporting_cases import CASES_BY_NAME

import seqtest
from seqtest.cli import main
from seqtest.reporting import (
    look_rows,
    plan_table_rows,
    report_html,
    report_markdown,
    summarize,
)

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "checkout_looks.csv"


class Tags(HTMLParser):
    """Every start tag with its attributes, and the text outside tags."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list) -> None:
        self.tags.append((tag, dict(attrs)))

    def handle_startendtag(self, tag: str, attrs: list) -> None:
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def parse_html(page: str) -> Tags:
    p = Tags()
    p.feed(page)
    p.close()
    return p


def assert_self_contained(page: str) -> None:
    tags = parse_html(page)
    names = {t for t, _ in tags.tags}
    assert not names & {"script", "link", "img", "iframe", "object", "embed"}, names
    for tag, attrs in tags.tags:
        for key, val in attrs.items():
            if key in ("src", "href", "xlink:href", "action", "data"):
                raise AssertionError(f"<{tag} {key}={val!r}> in a self-contained page")
            if key == "style":
                assert "url(" not in (val or "")
    assert "@import" not in page and "url(http" not in page
    assert set(re.findall(r"[a-z]+://[^\s\"'<>)]+", page)) <= {"http://www.w3.org/2000/svg"}


def visible_text(page: str) -> str:
    return " ".join(" ".join(parse_html(page).text).split())


@pytest.fixture(scope="module")
def analyses() -> dict:
    return {name: case.analyze() for name, case in CASES_BY_NAME.items()}


@pytest.mark.parametrize("name", list(CASES_BY_NAME))
def test_the_html_report_stands_alone_and_says_what_the_library_says(analyses, name):
    a, plan = analyses[name], CASES_BY_NAME[name].plan
    page = report_html(a, plan, title=f"Invented shop: {name}", generated="2026-03-09")
    assert page.startswith("<!DOCTYPE html>")
    assert_self_contained(page)
    text = visible_text(page)
    s = summarize(a)
    for sentence in s.sentences:
        assert " ".join(sentence.split()) in text
    assert seqtest.CAUTION in text
    assert f"Invented shop: {name}" in text and "2026-03-09" in text
    # every look's row, and for a group-sequential plan with a metric, users per look
    for row in look_rows(a)[1]:
        assert " ".join(row) in text or all(cell in text for cell in row)
    rows = plan_table_rows(plan)
    if rows:
        for row in rows[1]:
            assert all(cell in text for cell in row)
    # the sample-ratio alert comes before the decision on the page
    if s.alert:
        assert text.index("Sample-ratio mismatch") < text.index(s.headline)
    # the charts are inline SVG, well-formed
    svgs = re.findall(r"<svg.*?</svg>", page, flags=re.S)
    assert len(svgs) == 2
    for svg in svgs:
        ET.fromstring(svg)
    # a phone can read it: the page scales, wide tables scroll sideways
    assert 'name="viewport"' in page and "seqtest-scroll" in page


def test_users_per_look_in_the_plan_table():
    plan = seqtest.design(looks=4, metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    headers, rows = plan_table_rows(plan)
    ss = plan.sample_size()
    assert headers[2:4] == ["users, control", "users, treatment"]
    assert [r[2] for r in rows] == [f"{int(n):,}" for n in ss.per_look_control]
    assert [r[3] for r in rows] == [f"{int(n):,}" for n in ss.per_look_treatment]
    html = plan._repr_html_()
    assert all(f"<td>{int(n):,}</td>" in html for n in ss.per_look_control)
    assert seqtest.CAUTION in unescape(html)


def test_the_markdown_report(analyses):
    a = analyses["binary_difference_stop"]
    plan = CASES_BY_NAME["binary_difference_stop"].plan
    md = report_markdown(a, plan, title="Invented tea shop", generated="2026-03-09",
                         charts={"z path": "r-z.svg"})
    s = summarize(a)
    assert md.startswith("# Invented tea shop")
    assert f"**{s.headline}** {s.effect}" in md
    assert "![z path](r-z.svg)" in md and seqtest.CAUTION in md
    rows = [line for line in md.splitlines() if line.startswith("| 3 |")]
    # look 3 in the looks table and in the plan's table
    assert len(rows) == 2 and rows[0].endswith("| stop for efficacy |")
    assert "| 3 | 60.0% |" in rows[1]


def test_notebook_displays(analyses):
    a = analyses["sample_ratio_mismatch"]
    html = a._repr_html_()
    text = visible_text(html)
    s = summarize(a)
    assert "<table" in html and s.headline in text and seqtest.CAUTION in text
    assert text.index("Sample-ratio mismatch") < text.index(s.headline)
    mix = CASES_BY_NAME["mixture_stop"].plan
    assert "mixture" in visible_text(mix._repr_html_())
    assert_self_contained(html)


# -- the command line ---------------------------------------------------------------

def run(args: list[str], capsys) -> tuple[int, str, str]:
    rc = main(args)
    out, err = capsys.readouterr()
    return rc, out, err


@pytest.fixture
def plan_file(tmp_path) -> Path:
    from seqtest.cli.demo import DEMO_PLAN
    p = tmp_path / "plan.json"
    p.write_text(json.dumps(seqtest.design(**DEMO_PLAN).to_dict()))
    return p


def test_report_command_writes_html_and_markdown(plan_file, tmp_path, capsys):
    html, md = tmp_path / "r.html", tmp_path / "r.md"
    rc, out, _ = run(["report", str(EXAMPLE), "--plan", str(plan_file), "--html", str(html),
                      "--markdown", str(md), "--title", "Invented tea shop checkout",
                      "--metric-name", "the conversion rate"], capsys)
    assert rc == 0 and "wrote" in out
    page = html.read_text(encoding="utf-8")
    assert_self_contained(page)
    assert "Invented tea shop checkout" in page and "The conversion rate rose" in page
    for svg in (tmp_path / "r-z.svg", tmp_path / "r-effect.svg"):
        ET.fromstring(svg.read_text(encoding="utf-8"))
        assert f"]({svg.name})" in md.read_text(encoding="utf-8")


def test_report_command_needs_an_output(plan_file, capsys):
    rc, _, err = run(["report", str(EXAMPLE), "--plan", str(plan_file)], capsys)
    assert rc == 2 and "--html" in err


def _looks_csv(path: Path, rows: list[tuple[int, int, int, int]]) -> Path:
    path.write_text("control_n,control_successes,treatment_n,treatment_successes\n"
                    + "".join(f"{a},{b},{c},{d}\n" for a, b, c, d in rows))
    return path


def test_analyze_shows_a_sample_ratio_mismatch_first_with_its_own_status(plan_file,
                                                                         tmp_path, capsys):
    # 5,000 vs 5,600 users where an even split was planned: Pearson's chi-square is
    # (300^2 / 5300) * 2 = 34.0, p about 5e-9 (scipy.stats.chisquare gives the same)
    from scipy import stats
    assert stats.chisquare([5000, 5600]).pvalue < 1e-8
    looks = _looks_csv(tmp_path / "srm.csv", [(5000, 400, 5600, 470)])
    out_json = tmp_path / "a.json"
    rc, out, _ = run(["analyze", str(looks), "--plan", str(plan_file), "--json",
                      str(out_json)], capsys)
    assert rc == 4
    assert out.index("SAMPLE-RATIO MISMATCH") < out.index("Decision at look")
    doc = json.loads(out_json.read_text())
    assert doc["sample_ratio_mismatch"] == [1] and doc["decision"] == "continue"
    assert doc["summary"].startswith("Sample-ratio mismatch at look 1")
    # the paragraph printed under the decision is the JSON's summary after the alert
    s = summarize(doc)
    rest = " ".join(x for x in (s.headline, s.effect, s.outlook, s.caveat) if x)
    assert rest in " ".join(out.split())


@pytest.mark.parametrize("rows, status", [
    ([(2531, 198, 2506, 242)], 0),
    ([(2531, 198, 2506, 242), (5186, 424, 5157, 510), (7513, 612, 7512, 726)], 3),
])
def test_analyze_exit_status_is_the_decision(plan_file, tmp_path, capsys, rows, status):
    looks = _looks_csv(tmp_path / "looks.csv", rows)
    rc, out, _ = run(["analyze", str(looks), "--plan", str(plan_file), "--json", "-"],
                     capsys)
    doc = json.loads(out)
    assert rc == status == {"continue": 0, "stop_efficacy": 3}[doc["decision"]]


def test_analyze_shows_relative_effects_in_percent_beside_the_arms(tmp_path, capsys):
    plan = seqtest.design(looks=4, metric={"kind": "binary", "baseline": 0.1, "mde": 0.2,
                                           "relative": True, "scale": "relative"})
    p = tmp_path / "plan.json"
    p.write_text(json.dumps(plan.to_dict()))
    looks = _looks_csv(tmp_path / "looks.csv", [(3000, 300, 3000, 345)])
    rc, out, _ = run(["analyze", str(looks), "--plan", str(p)], capsys)
    assert rc == 0
    a = seqtest.analyze(plan, [{"control": {"n": 3000, "successes": 300},
                                "treatment": {"n": 3000, "successes": 345}}])
    lines = out.splitlines()
    header = next(line for line in lines if line.startswith("look"))
    assert "control (%)" in header and "treatment (%)" in header and "effect (%)" in header
    row = lines[lines.index(header) + 2].split()
    cells = dict(zip(["look", "n_c", "n_t", "control", "treatment", "effect"], row,
                     strict=False))
    # the arms' own rates and the relative effect, in percent, to the decimals shown
    x = a.looks[0]
    for cell, true in ((cells["control"], 100 * x.control_value),
                       (cells["treatment"], 100 * x.treatment_value),
                       (cells["effect"], 100 * x.estimate)):
        d = len(cell.split(".")[1]) if "." in cell else 0
        assert abs(float(cell) - true) <= 0.5 * 10 ** -d + 1e-12, (cell, true)
    assert "up by" in out and "%" in out


@pytest.mark.parametrize("bad", [
    '<link rel="stylesheet" href="https://cdn.example/x.css">',
    '<script>alert(1)</script>',
    '<img src="logo.png">',
    '<div style="background:url(https://example.org/a.png)"></div>',
    '<p>see https://example.org/page</p>',
])
def test_the_self_contained_check_can_fail(analyses, bad):
    page = report_html(analyses["continue"], generated="2026-03-09")
    with pytest.raises(AssertionError):
        assert_self_contained(page.replace("</main>", bad + "</main>"))
