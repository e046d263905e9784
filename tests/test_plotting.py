"""matplotlib figures (seqtest.plotting): returned, saved only when asked, readable.

Layout is checked with the renderer's own bounding boxes (Artist.get_window_extent on
the Agg renderer): every text lies inside the figure, every legend lies outside every
plotting area (off the data), the title names the experiment. Colours are from the
Okabe-Ito palette or greys (common practice for readers with colour blindness).
"""

from __future__ import annotations

import json
from typing import Any

import matplotlib
import pytest
from matplotlib.colors import to_hex, to_rgba
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.text import Text
from reporting_cases import CASES_BY_NAME

import seqtest
from seqtest.plotting import plot_analysis, plot_simulation
from seqtest.reporting.style import OKABE_ITO

matplotlib.use("Agg")


@pytest.fixture(scope="module")
def analyses() -> dict:
    return {name: case.analyze() for name, case in CASES_BY_NAME.items()}


def check_layout(fig: Figure) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    assert isinstance(fig.canvas, FigureCanvasAgg)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    # everything drawn (tick labels inside the view limits included) lies in the figure
    tight = fig.get_tightbbox(renderer)
    inches = fig.bbox_inches
    assert (tight.x0 >= inches.x0 - 0.01 and tight.y0 >= inches.y0 - 0.01
            and tight.x1 <= inches.x1 + 0.01 and tight.y1 <= inches.y1 + 0.01), tight
    # and so does each title, axis label, annotation and legend entry
    texts: list = [t for t in fig.texts]
    texts += [x for x in fig.findobj(Text) if x.get_text() == fig.get_suptitle()]
    for ax in fig.axes:
        texts += [ax.title, ax.xaxis.label, ax.yaxis.label, *ax.texts]
    for lg in fig.findobj(Legend):
        texts += lg.get_texts()
    texts = [t for t in texts if isinstance(t, Text) and t.get_visible()
             and t.get_text().strip()]
    assert texts
    for t in texts:
        bb = t.get_window_extent(renderer)
        assert (bb.x0 >= box.x0 - 1 and bb.y0 >= box.y0 - 1 and bb.x1 <= box.x1 + 1
                and bb.y1 <= box.y1 + 1), (t.get_text(), bb, box)
    axes = [ax.get_window_extent(renderer) for ax in fig.axes]
    legends = [x for x in fig.findobj(Legend)]
    assert legends
    for lg in legends:
        lb = lg.get_window_extent(renderer)
        assert lb.x0 >= box.x0 - 1 and lb.x1 <= box.x1 + 1 and lb.y0 >= box.y0 - 1
        for ab in axes:
            assert not lb.overlaps(ab), (lb, ab)


def colours(fig: Figure) -> set[str]:
    out = set()
    for ax in fig.axes:
        for line in ax.get_lines():
            out.add(to_hex(line.get_color()))
        for patch in ax.patches:
            r, g, b, a = to_rgba(patch.get_facecolor())
            if patch.get_visible() and a > 0:
                out.add(to_hex((r, g, b)))
    return out


def assert_palette(fig: Figure) -> None:
    palette = {c.lower() for c in OKABE_ITO.values()}
    for c in colours(fig):
        assert c in palette or (c[1:3] == c[3:5] == c[5:7]), c


@pytest.mark.parametrize("name", list(CASES_BY_NAME))
def test_plot_analysis_returns_a_readable_figure(analyses, name, tmp_path):
    a, plan = analyses[name], CASES_BY_NAME[name].plan
    before = set(tmp_path.iterdir())
    fig = plot_analysis(a, plan, title=f"Invented shop {name}")
    assert isinstance(fig, Figure)
    assert set(tmp_path.iterdir()) == before  # nothing saved without a path
    check_layout(fig)
    assert_palette(fig)
    assert fig.get_suptitle() == f"Invented shop {name}"
    assert fig.get_supxlabel().replace("\n", " ") == seqtest.CAUTION
    z_ax, e_ax = fig.axes
    # the decision is in the z panel's title, with the look it was taken at
    assert f"look {len(a.looks)}:" in z_ax.get_title()
    # the observed z path has one point per look; the effect panel one estimate per look
    observed = [ln for ln in z_ax.get_lines() if ln.get_label() == "observed z"]
    assert len(observed) == 1 and len(observed[0].get_xdata()) == len(a.looks)
    est = [ln for ln in e_ax.get_lines() if ln.get_label() == "estimate at the look"]
    assert len(est) == 1 and len(est[0].get_xdata()) == len(a.looks)
    adjusted = [ln for ln in e_ax.get_lines() if ln.get_label() == "adjusted at the stop"]
    assert len(adjusted) == (1 if a.final is not None and a.plan_kind != "mixture" else 0)


def test_plot_analysis_saves_when_asked(analyses, tmp_path):
    path = tmp_path / "looks.png"
    fig = plot_analysis(analyses["continue"], None, path)
    assert isinstance(fig, Figure) and path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    svg = tmp_path / "looks.svg"
    plot_analysis(analyses["continue"], path=svg)
    assert svg.read_text().lstrip().startswith("<?xml")


def test_no_pyplot_state_is_left_behind(analyses):
    import matplotlib.pyplot as plt
    before = plt.get_fignums()
    plot_analysis(analyses["mixture_stop"])
    assert plt.get_fignums() == before


def test_the_old_positional_call_still_works(analyses, tmp_path):
    # the first release called plot_analysis(analysis, plan, path)
    case = CASES_BY_NAME["binary_difference_stop"]
    plot_analysis(analyses["binary_difference_stop"], case.plan, tmp_path / "a.png")
    assert (tmp_path / "a.png").exists()
    assert seqtest.plot_analysis is plot_analysis


def _simulation(null: bool, futility: str | None) -> Any:
    from seqtest.simulation.engine import simulate
    from seqtest.simulation.scenarios import scenario_from_dict
    plan = seqtest.design(looks=5, futility=futility,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    sc = scenario_from_dict({"name": "invented_checkout", "data": {"kind": "binary",
                                                                    "rate": 0.1},
                             "effect": {"mde_multiple": 0.0 if null else 0.5}})
    return simulate(plan, sc, 2000, seed=5)


@pytest.mark.parametrize("null, futility", [(True, None), (False, "pocock-type")])
def test_plot_simulation_shows_the_interim_stops(null, futility, tmp_path):
    res = _simulation(null, futility)
    fig = plot_simulation(res, tmp_path / "sim.png", title="Invented checkout")
    assert (tmp_path / "sim.png").read_bytes()[:4] == b"\x89PNG"
    check_layout(fig)
    assert_palette(fig)
    assert fig.get_suptitle().startswith("Invented checkout")
    _, stops_ax, done_ax = fig.axes
    # the interim stops fill their own axis (its top is 1.18 times the tallest stack),
    # while the experiments that ended without significance are on another axis
    share = res.stops[:, :3].sum(axis=1) / res.reps
    top = stops_ax.get_ylim()[1]
    assert share.max() / top == pytest.approx(1 / 1.18, rel=1e-9)
    assert done_ax.get_ylim()[1] >= (res.stops[:, 3] / res.reps).max()
    if null:  # most experiments end without significance: that big bar is elsewhere
        assert (res.stops[:, 3].sum() / res.reps) > 10 * share.max()
    # the same from the JSON
    check_layout(plot_simulation(json.loads(json.dumps(res.to_dict()))))
    assert seqtest.plot_simulation is plot_simulation
