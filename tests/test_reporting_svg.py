"""The SVG charts (seqtest.reporting.svg): well-formed, complete, readable.

Checks: each chart parses as XML (xml.etree); it holds one marker per look (and per
boundary and tail) and one bar per simulated outcome that occurred; every label lies
inside the view box, its width bounded by svg.text_width, which is itself checked
against the glyph widths of DejaVu Sans (the first font the charts ask for) measured
by matplotlib's TextPath; legends sit below the plotting areas; colours come from the
Okabe-Ito palette or are greys (common practice for readers with colour blindness);
ids are unique and every reference resolves; nothing is loaded from outside.
"""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET

import pytest
from reporting_cases import CASES_BY_NAME, continuous_looks

import seqtest
from seqtest.reporting import effect_svg, simulation_svg, z_path_svg
from seqtest.reporting.style import OKABE_ITO
from seqtest.reporting.svg import CHAR_WIDTH, text_width

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def analyses() -> dict:
    return {name: case.analyze() for name, case in CASES_BY_NAME.items()}


def parse(svg: str) -> ET.Element:
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG}svg"
    return root


def by_class(root: ET.Element, cls: str) -> list[ET.Element]:
    return [e for e in root.iter() if e.get("class") == cls]


def attr(e: ET.Element, name: str) -> str:
    value = e.get(name)
    assert value is not None, (e.tag, name)
    return value


def num(e: ET.Element, name: str) -> float:
    return float(attr(e, name))


def view(root: ET.Element) -> tuple[float, float]:
    x0, y0, w, h = map(float, attr(root, "viewBox").split())
    assert x0 == 0 and y0 == 0
    return w, h


def label_boxes(root: ET.Element) -> list[tuple[str, float, float, float, float]]:
    """(text, left, top, right, bottom) of every label, with the width the layout
    reserves and a full em above the baseline, a quarter below."""
    out = []
    for t in root.iter(f"{SVG}text"):
        s = "".join(t.itertext())
        x, y, size = num(t, "x"), num(t, "y"), num(t, "font-size")
        w = text_width(s, size)
        if t.get("transform", "").startswith("rotate(-90"):
            out.append((s, x - size, y - w / 2, x + 0.25 * size, y + w / 2))
            continue
        left = x - {"start": 0.0, "middle": w / 2, "end": w}[t.get("text-anchor", "start")]
        out.append((s, left, y - size, left + w, y + 0.25 * size))
    return out


def plot_areas(root: ET.Element) -> list[tuple[float, float, float, float]]:
    return [(num(r, "x"), num(r, "y"), num(r, "x") + num(r, "width"),
             num(r, "y") + num(r, "height")) for r in by_class(root, "plot-area")]


def check_layout(svg: str) -> ET.Element:
    root = parse(svg)
    w, h = view(root)
    for s, left, top, right, bottom in label_boxes(root):
        assert left >= 0 and top >= 0 and right <= w and bottom <= h, (s, left, top, right,
                                                                        bottom, w, h)
    # legends below every plotting area: off the data
    lowest = max(b for _, _, _, b in plot_areas(root))
    for t in by_class(root, "legend-label"):
        assert num(t, "y") - num(t, "font-size") > lowest
    # colours: Okabe-Ito or greys (r = g = b), white, none, or a pattern of this chart
    palette = {c.lower() for c in OKABE_ITO.values()}
    for e in root.iter():
        for attr in ("fill", "stroke"):
            c = (e.get(attr) or "none").lower()
            if c in ("none", "#ffffff") or c.startswith("url(#"):
                continue
            grey = re.fullmatch(r"#([0-9a-f]{2})\1\1", c)
            assert c in palette or grey, (e.tag, attr, c)
    # ids unique, references resolve, nothing from outside
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert len(ids) == len(set(ids))
    for ref in re.findall(r"url\(#([^)]+)\)", svg):
        assert ref in ids
    assert "<script" not in svg and "href" not in svg
    assert re.findall(r"https?://[^\s\"']+", svg) == ["http://www.w3.org/2000/svg"]
    return root


@pytest.mark.parametrize("name", list(CASES_BY_NAME))
def test_z_path_has_a_point_per_look_and_stays_in_its_box(analyses, name):
    a = analyses[name]
    plan = CASES_BY_NAME[name].plan
    root = check_layout(z_path_svg(a, plan, title=f"Invented shop test {name}"))
    n = len(a.looks)
    assert len(by_class(root, "z-point")) == n
    assert len(by_class(root, "efficacy-point")) == n * a.sides
    n_fut = sum(x.futility_z is not None for x in a.looks)
    assert len(by_class(root, "futility-point")) == n_fut * a.sides
    assert len(by_class(root, "futility-band")) == (1 if n_fut else 0)
    planned = 0 if a.plan_kind == "mixture" else a.sides
    assert len(by_class(root, "planned-efficacy")) == planned
    # the observed points lie in the plotting area, in the order of the looks
    left, top, right, bottom = plot_areas(root)[0]
    xs = [float(c.get("cx")) for c in by_class(root, "z-point")]
    for c in by_class(root, "z-point"):
        assert left <= float(c.get("cx")) <= right and top <= float(c.get("cy")) <= bottom
    assert xs == sorted(xs)
    # the title names the experiment; the decision is written out of the data
    title = root.find(f"{SVG}title").text
    assert f"Invented shop test {name}" in title
    label = by_class(root, "decision-label")
    assert len(label) == 1 and f"look {n}" in (label[0].text or "")
    assert num(label[0], "y") < top
    # a chart that shows a decision carries the caution
    caution = " ".join(t.text or "" for t in by_class(root, "caution"))
    assert caution == seqtest.CAUTION


@pytest.mark.parametrize("name", list(CASES_BY_NAME))
def test_effect_chart_has_an_interval_per_look(analyses, name):
    a = analyses[name]
    root = check_layout(effect_svg(a, title="Invented shop"))
    assert len(by_class(root, "effect-point")) == len(a.looks)
    assert len(by_class(root, "interval")) == len(a.looks)
    adjusted = a.final is not None and a.plan_kind != "mixture"
    assert len(by_class(root, "adjusted-point")) == (1 if adjusted else 0)
    # a higher estimate is drawn higher (the y axis points up)
    ys = [float(c.get("cy")) for c in by_class(root, "effect-point")]
    est = [x.estimate for x in a.looks]
    for i in range(len(est)):
        for j in range(len(est)):
            if est[i] > est[j] + 1e-12:
                assert ys[i] < ys[j]


def test_many_looks_and_a_long_title_stay_inside():
    plan = seqtest.design(looks=50)
    zs = [0.3 + 0.02 * k for k in range(50)]
    a = seqtest.analyze(plan, continuous_looks(zs), metric="continuous", max_n=100_000)
    long = "An invented experiment with a very long name " * 5
    for svg in (z_path_svg(a, plan, title=long), effect_svg(a, title=long)):
        root = check_layout(svg)
        ticks = [t for t in by_class(root, "tick")]
        assert len(ticks) <= 40  # thinned labels of 50 looks
    assert len(by_class(parse(z_path_svg(a, plan)), "z-point")) == 50


@pytest.mark.parametrize("width", [320.0, 480.0])
def test_narrow_charts_keep_their_labels_inside(analyses, width):
    # labels are moved (and, when longer than the chart is wide, made smaller) so that
    # they stay in the view box at any width
    for name in ("binary_difference_stop", "relative_one_sided_continue", "mixture_stop"):
        a = analyses[name]
        check_layout(z_path_svg(a, CASES_BY_NAME[name].plan, title=name, width=width))
        check_layout(effect_svg(a, title=name, width=width))
    check_layout(simulation_svg(_simulation(True, None), width=width + 200))


def test_text_width_bounds_the_glyphs_of_dejavu_sans(analyses):
    # Source: matplotlib's bundled DejaVu Sans, measured by TextPath, for every label
    # of every chart (the SVG font stack starts with it)
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextPath
    prop = FontProperties(family="DejaVu Sans")
    seen = 0
    for name, a in analyses.items():
        for svg in (z_path_svg(a, CASES_BY_NAME[name].plan, title=name), effect_svg(a)):
            for t in parse(svg).iter(f"{SVG}text"):
                s = "".join(t.itertext())
                size = float(t.get("font-size"))
                real = TextPath((0, 0), s, size=size, prop=prop).get_extents().width
                assert real <= text_width(s, size), (s, real, text_width(s, size))
                seen += 1
    assert seen > 100 and CHAR_WIDTH < 1


def _simulation(null: bool, futility: str | None) -> dict:
    from seqtest.simulation.engine import simulate
    from seqtest.simulation.scenarios import scenario_from_dict
    plan = seqtest.design(looks=5, futility=futility,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    sc = scenario_from_dict({"name": "invented_checkout", "data": {"kind": "binary",
                                                                    "rate": 0.1},
                             "effect": {"mde_multiple": 0.0 if null else 0.5}})
    return simulate(plan, sc, 2000, seed=3).to_dict()


@pytest.mark.parametrize("null, futility", [(True, None), (False, "pocock-type")])
def test_simulation_chart_shows_the_interim_stops(null, futility):
    r = _simulation(null, futility)
    svg = simulation_svg(r, title="Invented checkout")
    root = check_layout(svg)
    outcomes = ("stop_efficacy_upper", "stop_efficacy_lower", "stop_futility",
                "complete_not_significant")
    nonzero = {(row["look"], o) for row in r["looks"] for o in outcomes if row[o] > 0}
    bars = {(int(b.get("data-look")), b.get("data-outcome")) for b in by_class(root, "bar")}
    assert bars == nonzero and len(by_class(root, "bar")) == len(nonzero)
    # the interim stops have their own axis: the tallest stack fills most of its panel
    # (the axis ends 18% above it: 1 / 1.18 = 0.85), however many experiments ended
    # without significance, and those are in a separate panel
    (l1, t1, r1, b1), (l2, t2, r2, b2) = plot_areas(root)
    assert r1 < l2
    tallest: dict[int, float] = {}
    for b in by_class(root, "bar"):
        x = float(b.get("x"))
        if b.get("data-outcome") == "complete_not_significant":
            assert l2 <= x <= r2
        else:
            assert l1 <= x <= r1
            look = int(b.get("data-look"))
            tallest[look] = tallest.get(look, 0.0) + float(b.get("height"))
    assert max(tallest.values()) / (b1 - t1) > 0.8
    complete = sum(row["complete_not_significant"] for row in r["looks"]) / r["reps"]
    assert complete > 0.05  # a large share ended without significance, as intended
    json.dumps(r)


def test_charts_read_the_json_of_an_analysis(analyses):
    a = analyses["binary_difference_stop"]
    d = json.loads(json.dumps(a.to_dict()))
    assert z_path_svg(d, title="x") == z_path_svg(a, title="x")
    assert effect_svg(d, title="x") == effect_svg(a, title="x")


def test_two_charts_on_one_page_have_distinct_ids(analyses):
    a, b = analyses["continue"], analyses["mixture_stop"]
    page = z_path_svg(a) + z_path_svg(b) + effect_svg(a) + effect_svg(b)
    ids = re.findall(r'id="([^"]+)"', page)
    assert len(ids) == len(set(ids))
