"""Charts as inline SVG, written by this module alone (no script, no outside asset).

Three charts, each a self-contained ``<svg>`` element for an HTML page, a report or a
notebook:

- :func:`z_path_svg`: the z statistic of each look against the efficacy boundaries
  (both tails of a two-sided plan), the futility band and, given the plan, the planned
  boundaries;
- :func:`effect_svg`: the effect at each look with its interval valid at every look
  (repeated confidence interval or confidence sequence), and the adjusted estimate and
  interval at a stop;
- :func:`simulation_svg`: a simulation's stops per look by outcome, the stops before
  the end on their own axis next to the experiments that ended without significance,
  so that the large "complete" bar cannot flatten the interim stops.

Layout rules: the legend sits below the plotting area, never on the data; every label
is placed inside the view box, its width bounded by :func:`text_width` (an upper
bound for the fonts named in :data:`FONT`, checked against DejaVu Sans in the tests);
colours, markers and dash patterns come from :mod:`seqtest.reporting.style`. Each
chart's ids (clip path, hatch patterns) carry a hash of its content, so several charts
can share one page.
"""

from __future__ import annotations

import hashlib
import math
import textwrap
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any
from xml.sax.saxutils import escape, quoteattr

from seqtest.core.vocabulary import CAUTION
from seqtest.reporting import numbers as num
from seqtest.reporting.style import OUTCOME_STYLES, SERIES, Series, decision_words
from seqtest.reporting.summary import analysis_record, effect_units

__all__ = [
    "CHAR_WIDTH",
    "FONT",
    "effect_svg",
    "nice_ticks",
    "simulation_svg",
    "text_width",
    "z_path_svg",
]

#: Font stack of every label (wide sans-serif fonts first).
FONT = "DejaVu Sans, Verdana, Arial, Helvetica, sans-serif"
#: Width of one character in ems used to place labels: an upper bound for the fonts of
#: :data:`FONT` (DejaVu Sans averages about 0.55 em on text; its widest letters, W and
#: M, are about 1 em, and the tests check whole labels, not letters).
CHAR_WIDTH = 0.62
#: z values beyond this are drawn at the edge of the chart.
Z_CAP = 8.0
_MARGIN = 4.0


def text_width(text: str, size: float) -> float:
    """Width in pixels given to a label of ``text`` at font size ``size``."""
    return CHAR_WIDTH * size * len(text)


def nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    """Round tick values (1, 2, 2.5 or 5 times a power of ten) covering ``[lo, hi]``."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo]
    raw = (hi - lo) / max(1, count)
    mag = 10.0 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    ticks = []
    v = first
    while v <= hi + 1e-9 * step:
        ticks.append(0.0 if abs(v) < 1e-12 * step else round(v, 12))
        v += step
    return ticks


def _tick_decimals(values: Sequence[float]) -> int:
    """Decimals that show every tick exactly (ticks are multiples of a round step)."""
    if len(values) < 2:
        return num.decimals_for(values, 2)
    step = abs(values[1] - values[0])
    d = 0
    while d < num.MAX_DECIMALS and abs(step * 10 ** d - round(step * 10 ** d)) > 1e-9:
        d += 1
    return d


def _tick_text(values: Sequence[float]) -> list[str]:
    d = _tick_decimals(values)
    return [num.fixed(v, d) for v in values]


@dataclass
class _Box:
    """The plotting area in pixels and the data range it shows."""

    left: float
    top: float
    right: float
    bottom: float
    xmin: float
    xmax: float
    ymin: float
    ymax: float

    def x(self, v: float) -> float:
        span = self.xmax - self.xmin or 1.0
        return self.left + (v - self.xmin) / span * (self.right - self.left)

    def y(self, v: float) -> float:
        span = self.ymax - self.ymin or 1.0
        return self.bottom - (v - self.ymin) / span * (self.bottom - self.top)


class _Canvas:
    """An SVG document being written: shapes, clamped labels, a legend."""

    def __init__(self, width: float, height: float, key: str, title: str) -> None:
        self.width = width
        self.height = height
        self.key = key
        self.title = title
        self.defs: list[str] = []
        self.parts: list[str] = []
        self._fills: dict[tuple[str, str], str] = {}

    # -- primitives -----------------------------------------------------------------
    def add(self, element: str) -> None:
        self.parts.append(element)

    def text(self, x: float, y: float, s: str, *, size: float = 12.0, anchor: str = "start",
             weight: str = "normal", cls: str = "label", color: str = "#000000",
             rotate: bool = False) -> None:
        """A label, moved inside the view box if it would stick out (and made smaller
        if it is longer than the view box is wide)."""
        w = text_width(s, size)
        room = (self.height if rotate else self.width) - 2 * _MARGIN
        if w > room:
            size, w = size * room / w, room
        if rotate:  # vertical, reading upwards: the width runs along y
            y = min(max(y, _MARGIN + w / 2), self.height - _MARGIN - w / 2)
            x = min(max(x, _MARGIN + size), self.width - _MARGIN)
            self.add(f'<text class="{cls}" x="{x:.1f}" y="{y:.1f}" font-size="{size:g}" '
                     f'text-anchor="middle" transform="rotate(-90 {x:.1f} {y:.1f})" '
                     f'fill="{color}">{escape(s)}</text>')
            return
        start = {"start": x, "middle": x - w / 2, "end": x - w}[anchor]
        start = min(max(start, _MARGIN), self.width - _MARGIN - w)
        x = {"start": start, "middle": start + w / 2, "end": start + w}[anchor]
        y = min(max(y, _MARGIN + size), self.height - _MARGIN - 0.25 * size)
        bold = f' font-weight="{weight}"' if weight != "normal" else ""
        self.add(f'<text class="{cls}" x="{x:.1f}" y="{y:.1f}" font-size="{size:g}" '
                 f'text-anchor="{anchor}"{bold} fill="{color}">{escape(s)}</text>')

    def polyline(self, pts: Iterable[tuple[float, float]], s: Series, *, width: float = 2.0,
                 clip: bool = True, cls: str = "series") -> None:
        pts = list(pts)
        if len(pts) < 2:
            return
        d = " ".join(f"{x:.1f},{y:.1f}" for x, y in pts)
        dash = f' stroke-dasharray="{s.dash}"' if s.dash else ""
        cp = f' clip-path="url(#{self.key}-clip)"' if clip else ""
        self.add(f'<polyline class="{cls}" points="{d}" fill="none" stroke="{s.color}" '
                 f'stroke-width="{width:g}"{dash}{cp}/>')

    def marker(self, x: float, y: float, s: Series, *, cls: str, tip: str = "",
               size: float = 4.5, filled: bool = True) -> None:
        """A marker of the series' shape at (x, y), with a tooltip."""
        fill = s.color if filled else "#ffffff"
        title = f"<title>{escape(tip)}</title>" if tip else ""
        common = f'class="{cls}" fill="{fill}" stroke="{s.color}" stroke-width="1.5"'
        shape = s.marker or "o"
        r = size
        if shape == "o":
            self.add(f'<circle {common} cx="{x:.1f}" cy="{y:.1f}" r="{r:g}">{title}</circle>')
            return
        if shape == "s":
            self.add(f'<rect {common} x="{x - r:.1f}" y="{y - r:.1f}" width="{2 * r:g}" '
                     f'height="{2 * r:g}">{title}</rect>')
            return
        if shape == "D":
            d = f"M{x:.1f},{y - r * 1.2:.1f} L{x + r:.1f},{y:.1f} L{x:.1f},{y + r * 1.2:.1f} " \
                f"L{x - r:.1f},{y:.1f} Z"
        elif shape == "v":
            d = f"M{x - r:.1f},{y - r * 0.8:.1f} L{x + r:.1f},{y - r * 0.8:.1f} " \
                f"L{x:.1f},{y + r:.1f} Z"
        else:  # "^"
            d = f"M{x - r:.1f},{y + r * 0.8:.1f} L{x + r:.1f},{y + r * 0.8:.1f} " \
                f"L{x:.1f},{y - r:.1f} Z"
        self.add(f'<path {common} d="{d}">{title}</path>')

    def clip(self, box: _Box) -> None:
        self.defs.append(f'<clipPath id="{self.key}-clip"><rect x="{box.left:.1f}" '
                         f'y="{box.top:.1f}" width="{box.right - box.left:.1f}" '
                         f'height="{box.bottom - box.top:.1f}"/></clipPath>')

    # -- axes and legend -----------------------------------------------------------
    def axes(self, box: _Box, xticks: Sequence[float], yticks: Sequence[float],
             xlabel: str, ylabel: str, *, xtext: Sequence[str] | None = None,
             ytext: Sequence[str] | None = None) -> None:
        self.add(f'<rect class="plot-area" x="{box.left:.1f}" y="{box.top:.1f}" '
                 f'width="{box.right - box.left:.1f}" height="{box.bottom - box.top:.1f}" '
                 'fill="#ffffff" stroke="#555555" stroke-width="1"/>')
        for v, t in zip(yticks, ytext or _tick_text(yticks), strict=True):
            y = box.y(v)
            self.add(f'<line x1="{box.left:.1f}" x2="{box.right:.1f}" y1="{y:.1f}" '
                     f'y2="{y:.1f}" stroke="#e3e3e3" stroke-width="1"/>')
            self.text(box.left - 6, y + 4, t, size=11, anchor="end", cls="tick")
        for v, t in zip(xticks, xtext or _tick_text(xticks), strict=True):
            x = box.x(v)
            self.add(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{box.bottom:.1f}" '
                     f'y2="{box.bottom + 4:.1f}" stroke="#555555" stroke-width="1"/>')
            self.text(x, box.bottom + 17, t, size=11, anchor="middle", cls="tick")
        self.text((box.left + box.right) / 2, box.bottom + 34, xlabel, size=12,
                  anchor="middle", cls="axis-label")
        self.text(14, (box.top + box.bottom) / 2, ylabel, size=12, cls="axis-label",
                  rotate=True)

    def legend(self, items: Sequence[tuple[Series, str]], top: float, left: float = 16.0,
               size: float = 11.0) -> float:
        """Legend entries in rows from ``top``, wrapped to the width; returns the y below
        the last row. Each entry: a line sample with its marker, or a filled swatch."""
        x, y = left, top + size
        row = size + 9
        for s, how in items:
            w = 30 + text_width(s.label, size) + 18
            if x + w > self.width - _MARGIN and x > left:
                x, y = left, y + row
            cy = y - size * 0.35
            if how == "band":
                self.add(f'<rect class="legend-swatch" x="{x:.1f}" y="{cy - 6:.1f}" '
                         f'width="24" height="12" fill="{s.color}" fill-opacity="0.25" '
                         f'stroke="{s.color}"/>')
            elif how == "bar":
                self.add(f'<rect class="legend-swatch" x="{x:.1f}" y="{cy - 6:.1f}" '
                         f'width="24" height="12" fill="{self.fill(s)}" stroke="#333333" '
                         'stroke-width="0.5"/>')
            else:
                if how != "marker":
                    dash = f' stroke-dasharray="{s.dash}"' if s.dash else ""
                    self.add(f'<line class="legend-line" x1="{x:.1f}" x2="{x + 24:.1f}" '
                             f'y1="{cy:.1f}" y2="{cy:.1f}" stroke="{s.color}" '
                             f'stroke-width="2"{dash}/>')
                if s.marker:
                    self.marker(x + 12, cy, s, cls="legend-marker", size=4)
            self.text(x + 30, y, s.label, size=size, cls="legend-label")
            x += w
        return y + 8

    def fill(self, s: Series) -> str:
        """The fill of a bar: a colour, or a hatch pattern over the colour."""
        if not s.hatch:
            return s.color
        if (s.color, s.hatch) in self._fills:
            return self._fills[(s.color, s.hatch)]
        pid = f"{self.key}-hatch-{len(self._fills)}"
        self._fills[(s.color, s.hatch)] = f"url(#{pid})"
        lines = {"//": "M-1,7 l8,-8 M0,8 l8,-8", "xx": "M0,0 l8,8 M0,8 l8,-8",
                 "..": "M2,2 h1 M6,6 h1"}[s.hatch]
        stroke = "1.2" if s.hatch != ".." else "2"
        self.defs.append(f'<pattern id="{pid}" patternUnits="userSpaceOnUse" width="8" '
                         f'height="8"><rect width="8" height="8" fill="{s.color}"/>'
                         f'<path d="{lines}" stroke="#ffffff" stroke-width="{stroke}"/>'
                         '</pattern>')
        return f"url(#{pid})"

    def to_svg(self, description: str) -> str:
        head = (f'<svg xmlns="http://www.w3.org/2000/svg" class="seqtest-chart" '
                f'viewBox="0 0 {self.width:g} {self.height:g}" width="{self.width:g}" '
                f'height="{self.height:g}" role="img" aria-labelledby="{self.key}-title" '
                f'style="max-width:100%;height:auto" font-family={quoteattr(FONT)}>')
        title = f'<title id="{self.key}-title">{escape(self.title)}</title>'
        desc = f"<desc>{escape(description)}</desc>"
        defs = f"<defs>{''.join(self.defs)}</defs>" if self.defs else ""
        return head + title + desc + defs + "".join(self.parts) + "</svg>"


def _key(prefix: str, *payload: Any) -> str:
    """An id for a chart's defs (clip paths), the same for the same chart at the same
    size and different otherwise, so two charts on one page never share one."""
    digest = hashlib.sha1(repr(payload).encode("utf-8")).hexdigest()[:10]
    return f"seqtest-{prefix}-{digest}"


def _finite(values: Iterable[Any]) -> list[float]:
    return [float(v) for v in values if num.is_number(v)]


def _title_line(c: _Canvas, text: str) -> None:
    size = 15.0
    while text_width(text, size) > c.width - 2 * _MARGIN - 8 and size > 9:
        size -= 0.5
    if text_width(text, size) > c.width - 2 * _MARGIN - 8:
        keep = int((c.width - 2 * _MARGIN - 8) / (CHAR_WIDTH * size)) - 1
        text = text[:max(1, keep)] + "…"
    c.text(12, 22, text, size=size, weight="bold", cls="chart-title")


# -- the z path ---------------------------------------------------------------------

def z_path_svg(analysis: Any, plan: Any = None, *, title: str | None = None,
               width: float = 720.0, height: float = 440.0) -> str:
    """The z statistic of each look against the boundaries, as an ``<svg>`` element.

    Parameters
    ----------
    analysis : Analysis or dict
        The analysis (or its ``to_dict()``).
    plan : Plan, optional
        Adds the planned boundaries (dashed) of a group-sequential plan.
    title : str, optional
        The experiment's name, shown in the chart's title.
    width, height : float
        Size of the view box in pixels (the chart scales down to narrow screens).

    Notes
    -----
    The x axis is the information fraction (a mixture plan: the units in the larger
    arm). Boundaries recomputed at the looks taken are drawn with markers, the planned
    ones dashed; the futility band (where a look advises stopping for futility) is
    shaded; z values beyond :data:`Z_CAP` are drawn at the edge.
    """
    r = analysis_record(analysis)
    looks = r.get("looks") or []
    if not looks:
        raise ValueError("analysis: got an analysis without looks; allowed is the result "
                         "of seqtest.analyze")
    mixture = r.get("plan_kind") == "mixture"
    sides = int(r.get("sides") or getattr(plan, "sides", 2) or 2)
    name = title or "Experiment"
    fractions = [x.get("information_fraction") for x in looks]
    by_size = mixture or not all(num.is_number(f) for f in fractions)
    xs = [max(float(x["n_control"]), float(x["n_treatment"])) for x in looks] if by_size \
        else [float(f) for f in fractions]
    z = [float(x["z"]) if num.is_number(x.get("z")) else 0.0 for x in looks]
    eff = [x.get("efficacy_z") for x in looks]
    fut = [x.get("futility_z") for x in looks]
    has_fut = any(num.is_number(f) for f in fut)
    planned = None
    if plan is not None and not mixture and hasattr(plan, "info_fractions") and not by_size:
        planned = (list(map(float, plan.info_fractions)), list(map(float, plan.efficacy_z)),
                   None if plan.futility_z is None else list(map(float, plan.futility_z)))

    ys = [abs(v) for v in z] + [abs(v) for v in _finite(eff)] + [abs(v) for v in
                                                                 _finite(fut)]
    if planned:
        ys += [abs(v) for v in planned[1] if math.isfinite(v)]
    top = min(Z_CAP, max([3.0, *ys]) * 1.08)
    if sides == 2:
        lo_y, hi_y = -top, top
    else:
        low = min([0.0, *z, *_finite(fut), *(planned[2] if planned and planned[2] else [])])
        lo_y, hi_y = max(-Z_CAP, min(-1.0, low * 1.08 - 0.2)), top
    xmax = max(1.0, max(xs)) if not by_size else max(xs) * 1.05
    c = _Canvas(width, height, _key("z", width, height, name, xs, z, eff, fut, planned), name)
    box = _Box(64, 54, width - 20, height - 150, 0.0, xmax, lo_y, hi_y)
    c.clip(box)
    _title_line(c, f"{name}: looks against the stopping boundaries")
    xt = nice_ticks(0.0, xmax, 5)
    c.axes(box, xt, nice_ticks(lo_y, hi_y, 6),
           "units in the larger arm (look at any time)" if by_size
           else "information fraction (share of the maximum sample)",
           "z statistic (treatment vs control)")
    c.add(f'<line x1="{box.left:.1f}" x2="{box.right:.1f}" y1="{box.y(0):.1f}" '
          f'y2="{box.y(0):.1f}" stroke="#777777" stroke-width="1"/>')

    def cap(v: Any) -> float:
        return max(lo_y, min(hi_y, float(v))) if num.is_number(v) else hi_y

    # futility band: where a look advises stopping for futility
    if has_fut:
        band = SERIES["futility_band"]
        pts = [(xs[j], float(f)) for j, f in enumerate(fut) if num.is_number(f)]
        if len(pts) >= 1:
            upper = [(box.x(x), box.y(cap(f))) for x, f in pts]
            lower = [(box.x(x), box.y(cap(-f) if sides == 2 else lo_y)) for x, f in pts]
            if len(pts) == 1:
                x0 = upper[0][0]
                upper = [(x0 - 4, upper[0][1]), (x0 + 4, upper[0][1])]
                lower = [(x0 - 4, lower[0][1]), (x0 + 4, lower[0][1])]
            poly = " ".join(f"{x:.1f},{y:.1f}" for x, y in [*upper, *reversed(lower)])
            c.add(f'<polygon class="futility-band" points="{poly}" fill="{band.color}" '
                  f'fill-opacity="0.22" stroke="none" clip-path="url(#{c.key}-clip)"/>')
    # planned boundaries
    if planned:
        t, a, b = planned
        pe = SERIES["planned_efficacy"]
        c.polyline([(box.x(x), box.y(cap(v))) for x, v in zip(t, a, strict=True)], pe,
                   width=1.5, cls="planned-efficacy")
        if sides == 2:
            c.polyline([(box.x(x), box.y(cap(-v))) for x, v in zip(t, a, strict=True)], pe,
                       width=1.5, cls="planned-efficacy")
        if b is not None:
            pf = SERIES["planned_futility"]
            c.polyline([(box.x(x), box.y(cap(v))) for x, v in zip(t, b, strict=True)], pf,
                       width=1.5, cls="planned-futility")
            if sides == 2:
                c.polyline([(box.x(x), box.y(cap(-v))) for x, v in zip(t, b, strict=True)],
                           pf, width=1.5, cls="planned-futility")
    # boundaries at the looks taken
    se, sl, sf = SERIES["efficacy"], SERIES["efficacy_lower"], SERIES["futility"]
    c.polyline([(box.x(x), box.y(cap(v))) for x, v in zip(xs, eff, strict=True)], se,
               cls="efficacy")
    for j, v in enumerate(eff):
        tip = f"look {j + 1}: efficacy boundary z = " + (num.fixed(v, 3) if num.is_number(v)
                                                        else "none (no alpha spent)")
        c.marker(box.x(xs[j]), box.y(cap(v)), se, cls="efficacy-point", tip=tip,
                 filled=num.is_number(v) and abs(float(v)) <= hi_y)
    if sides == 2:
        c.polyline([(box.x(x), box.y(cap(-float(v)) if num.is_number(v) else lo_y))
                    for x, v in zip(xs, eff, strict=True)], sl, cls="efficacy-lower")
        for j, v in enumerate(eff):
            c.marker(box.x(xs[j]), box.y(cap(-float(v)) if num.is_number(v) else lo_y), sl,
                     cls="efficacy-point", tip=f"look {j + 1}: lower efficacy boundary",
                     filled=num.is_number(v) and abs(float(v)) <= hi_y)
    if has_fut:
        fx = [(xs[j], float(f)) for j, f in enumerate(fut) if num.is_number(f)]
        c.polyline([(box.x(x), box.y(cap(f))) for x, f in fx], sf, cls="futility")
        if sides == 2:
            c.polyline([(box.x(x), box.y(cap(-f))) for x, f in fx], sf, cls="futility")
        for x, f in fx:
            c.marker(box.x(x), box.y(cap(f)), sf, cls="futility-point", size=3.5,
                     tip=f"futility boundary z = {num.fixed(f, 3)}")
            if sides == 2:
                c.marker(box.x(x), box.y(cap(-f)), sf, cls="futility-point", size=3.5)
    # the observed path
    so = SERIES["observed_z"]
    c.polyline([(box.x(x), box.y(cap(v))) for x, v in zip(xs, z, strict=True)], so,
               width=2.5, cls="observed")
    for j, v in enumerate(z):
        c.marker(box.x(xs[j]), box.y(cap(v)), so, cls="z-point",
                 tip=f"look {j + 1}: z = {num.fixed(v, 3)}")
    # the decision: a line under the title (never on the data) and a ring around the
    # look it was taken at
    word = decision_words(r.get("decision"), r.get("direction"))
    c.add(f'<circle class="decision-marker" cx="{box.x(xs[-1]):.1f}" '
          f'cy="{box.y(cap(z[-1])):.1f}" r="9" fill="none" stroke="{so.color}" '
          'stroke-width="1.5"/>')
    c.text(12, 40, f"decision at look {len(looks)}: {word}", size=12, weight="bold",
           cls="decision-label")
    items: list[tuple[Series, str]] = [(so, "line"), (se, "line")]
    if sides == 2:
        items.append((sl, "line"))
    if has_fut:
        items += [(sf, "line"), (SERIES["futility_band"], "band")]
    if planned:
        items.append((SERIES["planned_efficacy"], "line"))
        if planned[2] is not None:
            items.append((SERIES["planned_futility"], "line"))
    bottom = c.legend(items, box.bottom + 46)
    # the chart shows a decision, so it carries the caution
    per_line = max(20, int((width - 2 * _MARGIN - 16) / (CHAR_WIDTH * 10)))
    for line in textwrap.wrap(CAUTION, per_line):
        bottom += 13
        c.text(12, bottom, line, size=10, cls="caution", color="#555555")
    c.height = bottom + 8
    desc = (f"z statistic of {len(looks)} look(s) against the efficacy boundaries"
            + (" and the futility band" if has_fut else "") + f"; decision: {word}.")
    return c.to_svg(desc)


# -- the effect ---------------------------------------------------------------------

def effect_svg(analysis: Any, *, title: str | None = None, width: float = 720.0,
               height: float = 400.0) -> str:
    """The effect at each look with its interval, as an ``<svg>`` element.

    The estimate of each look with its interval valid at every look (repeated
    confidence interval, or confidence sequence for a mixture plan), on the effect's
    own scale (percentage points for a difference of rates, percent for a relative
    effect); at a stop of a group-sequential plan, the median-unbiased estimate with
    the adjusted interval beside the looks. A one-sided interval's open end is drawn
    as an arrow at the edge.
    """
    r = analysis_record(analysis)
    looks = r.get("looks") or []
    if not looks:
        raise ValueError("analysis: got an analysis without looks; allowed is the result "
                         "of seqtest.analyze")
    units = effect_units(str(r.get("metric_kind") or ""), str(r.get("scale") or
                                                               "difference"))
    mixture = r.get("plan_kind") == "mixture"
    sides = int(r.get("sides") or 2)
    name = title or "Experiment"
    f = units.factor
    est = [float(x["estimate"]) * f if num.is_number(x.get("estimate")) else None
           for x in looks]
    lo = [float(x["interval_lower"]) * f if num.is_number(x.get("interval_lower")) else None
          for x in looks]
    hi = [float(x["interval_upper"]) * f if num.is_number(x.get("interval_upper")) else None
          for x in looks]
    fin = r.get("final") or None
    adjusted = None
    if fin and not mixture and num.is_number(fin.get("median_unbiased")):
        adjusted = (float(fin["median_unbiased"]) * f,
                    float(fin["ci_lower"]) * f if num.is_number(fin.get("ci_lower")) else None,
                    float(fin["ci_upper"]) * f if num.is_number(fin.get("ci_upper")) else None)
    values = _finite([*est, *lo, *hi, 0.0, *(adjusted or ())])
    ymin, ymax = min(values), max(values)
    pad = 0.08 * (ymax - ymin or 1.0)
    ymin, ymax = ymin - pad, ymax + pad
    open_top = any(h is None and e is not None for h, e in zip(hi, est, strict=True)) or (
        adjusted is not None and adjusted[2] is None)
    if open_top:
        ymax += 2 * pad
    slots = len(looks) + (1 if adjusted else 0)
    c = _Canvas(width, height, _key("effect", width, height, name, est, lo, hi, adjusted), name)
    box = _Box(72, 40, width - 20, height - 130, 0.4, slots + 0.6, ymin, ymax)
    c.clip(box)
    _title_line(c, f"{name}: the effect at each look")
    xt = [float(k) for k in range(1, slots + 1)]
    xtext = [str(k) for k in range(1, len(looks) + 1)] + (["at stop"] if adjusted else [])
    if len(xt) > 16:  # thin the labels of many looks
        step = math.ceil(len(xt) / 16)
        keep = [i for i in range(len(xt)) if i % step == 0 or i == len(xt) - 1]
        xt, xtext = [xt[i] for i in keep], [xtext[i] for i in keep]
    yt = nice_ticks(ymin, ymax, 6)
    c.axes(box, xt, yt, "look", units.axis, xtext=xtext)
    c.add(f'<line class="zero" x1="{box.left:.1f}" x2="{box.right:.1f}" y1="{box.y(0):.1f}" '
          f'y2="{box.y(0):.1f}" stroke="#777777" stroke-width="1" stroke-dasharray="4 3"/>')
    si, se, sa = SERIES["interval"], SERIES["estimate"], SERIES["adjusted"]
    if mixture:
        si = Series("confidence sequence (valid however often you look)", si.color)
    elif sides == 1:
        si = Series("repeated interval, one-sided (valid at every look)", si.color)
    d = num.decimals_for(values, 3)

    def whisker(x: float, a: float | None, b: float | None, s: Series, cls: str) -> None:
        if a is None:
            return
        ya = box.y(a)
        yb = box.y(b) if b is not None else box.top + 2
        c.add(f'<line class="{cls}" x1="{x:.1f}" x2="{x:.1f}" y1="{ya:.1f}" y2="{yb:.1f}" '
              f'stroke="{s.color}" stroke-width="2.5"/>')
        c.add(f'<line x1="{x - 6:.1f}" x2="{x + 6:.1f}" y1="{ya:.1f}" y2="{ya:.1f}" '
              f'stroke="{s.color}" stroke-width="2"/>')
        if b is not None:
            c.add(f'<line x1="{x - 6:.1f}" x2="{x + 6:.1f}" y1="{yb:.1f}" y2="{yb:.1f}" '
                  f'stroke="{s.color}" stroke-width="2"/>')
        else:  # open end: an arrow
            c.add(f'<path d="M{x - 5:.1f},{yb + 7:.1f} L{x:.1f},{yb:.1f} L{x + 5:.1f},'
                  f'{yb + 7:.1f}" fill="none" stroke="{s.color}" stroke-width="2"/>')

    for j in range(len(looks)):
        x = box.x(j + 1)
        whisker(x, lo[j], hi[j], si, "interval")
        e = est[j]
        if e is not None:
            tip = (f"look {j + 1}: {num.signed(e, d)}{units.unit} "
                   f"[{num.signed(lo[j], d) if lo[j] is not None else '-'}, "
                   f"{num.signed(hi[j], d) if hi[j] is not None else 'open'}]")
            c.marker(x, box.y(e), se, cls="effect-point", tip=tip)
    if adjusted:
        x = box.x(slots)
        whisker(x, adjusted[1], adjusted[2], sa, "adjusted-interval")
        c.marker(x, box.y(adjusted[0]), sa, cls="adjusted-point", size=5.5,
                 tip=f"median-unbiased estimate {num.signed(adjusted[0], d)}{units.unit}")
    items: list[tuple[Series, str]] = [(se, "marker"), (si, "line")]
    if adjusted:
        items.append((Series("adjusted estimate and interval at the stop", sa.color,
                             sa.marker), "line"))
    c.height = c.legend(items, box.bottom + 46) + 6
    return c.to_svg(f"effect at {len(looks)} look(s) with intervals valid at every look"
                    + ("; the adjusted estimate at the stop" if adjusted else ""))


# -- simulations ----------------------------------------------------------------------

def _sim_record(result: Any) -> dict:
    if isinstance(result, Mapping):
        return dict(result)
    if hasattr(result, "to_dict"):
        return dict(result.to_dict())
    raise TypeError(f"result: got {type(result).__name__}; allowed is a SimulationResult "
                    "or its to_dict()")


def simulation_svg(result: Any, *, title: str | None = None, width: float = 720.0,
                   height: float = 400.0) -> str:
    """A simulation's stops per look, as an ``<svg>`` element.

    Left: the share of simulated experiments stopping at each look for efficacy
    (treatment better, control better) or futility, stacked, on an axis of their own.
    Right: the share that ended without significance, on a separate axis, so the
    interim stops stay visible however large that share is. Bars carry hatch patterns
    as well as colours.
    """
    r = _sim_record(result)
    rows = r.get("looks") or []
    reps = float(r.get("reps") or 0)
    if not rows or reps <= 0:
        raise ValueError("result: got a simulation without looks; allowed is the result of "
                         "seqtest.simulation.engine.simulate")
    name = title or str(r.get("scenario") or "Simulation")
    interim = ("stop_efficacy_upper", "stop_efficacy_lower", "stop_futility")
    done = "complete_not_significant"
    share = [{o: float(row.get(o) or 0) / reps for o in (*interim, done)} for row in rows]
    c = _Canvas(width, height, _key("sim", width, height, name, share), name)
    stacked = [sum(s[o] for o in interim) for s in share]
    top_a = max(stacked) if max(stacked) > 0 else 0.01
    top_a *= 1.18
    split = width - 190
    box = _Box(72, 48, split - 20, height - 120, 0.4, len(rows) + 0.6, 0.0, top_a)
    _title_line(c, f"{name}: where {int(reps):,} simulated experiments stopped")
    yt = nice_ticks(0.0, top_a, 5)
    xt = [float(k) for k in range(1, len(rows) + 1)]
    xtext = [str(k) for k in range(1, len(rows) + 1)]
    if len(xt) > 14:
        step = math.ceil(len(xt) / 14)
        keep = [i for i in range(len(xt)) if i % step == 0 or i == len(xt) - 1]
        xt, xtext = [xt[i] for i in keep], [xtext[i] for i in keep]
    c.axes(box, xt, yt, "look", "share of experiments stopping",
           ytext=[num.percent(v, _tick_decimals([100 * t for t in yt])) for v in yt])
    c.text((box.left + box.right) / 2, box.top - 6, "stops for efficacy or futility",
           size=11, anchor="middle", cls="panel-title")
    bw = min(40.0, 0.7 * (box.right - box.left) / len(rows))
    fills = {o: c.fill(OUTCOME_STYLES[o]) for o in (*interim, done)}
    dec = num.decimals_for([100 * v for v in stacked], 2)
    for j, s in enumerate(share):
        base = 0.0
        x = box.x(j + 1) - bw / 2
        for o in interim:
            if s[o] <= 0:
                continue
            y0, y1 = box.y(base), box.y(base + s[o])
            c.add(f'<rect class="bar" data-look="{j + 1}" data-outcome="{o}" x="{x:.1f}" '
                  f'y="{y1:.1f}" width="{bw:.1f}" height="{max(0.5, y0 - y1):.1f}" '
                  f'fill="{fills[o]}" stroke="#333333" stroke-width="0.5"><title>look '
                  f'{j + 1}, {escape(OUTCOME_STYLES[o].label)}: '
                  f'{num.percent(s[o], max(dec, 2))}</title></rect>')
            base += s[o]
        if base > 0 and len(rows) <= 14:
            c.text(box.x(j + 1), box.y(base) - 4, num.percent(base, dec), size=10,
                   anchor="middle", cls="bar-label")
    # the experiments that ended without significance, on their own axis
    ends = [(j, s[done]) for j, s in enumerate(share) if s[done] > 0]
    box2 = _Box(split + 44, 48, width - 24, height - 120, 0.4, max(1, len(ends)) + 0.6, 0.0,
                max([v for _, v in ends], default=0.01) * 1.18)
    c.add(f'<rect class="plot-area" x="{box2.left:.1f}" y="{box2.top:.1f}" '
          f'width="{box2.right - box2.left:.1f}" height="{box2.bottom - box2.top:.1f}" '
          'fill="#ffffff" stroke="#555555" stroke-width="1"/>')
    c.text((box2.left + box2.right) / 2, box2.top - 6, "no significance", size=11,
           anchor="middle", cls="panel-title")
    yt2 = nice_ticks(0.0, box2.ymax, 4)
    d2 = _tick_decimals([100 * t for t in yt2])
    for v in yt2:
        c.text(box2.left - 5, box2.y(v) + 4, num.percent(v, d2), size=10, anchor="end",
               cls="tick")
    bw2 = min(36.0, 0.6 * (box2.right - box2.left) / max(1, len(ends)))
    for i, (j, v) in enumerate(ends):
        x = box2.x(i + 1) - bw2 / 2
        y1 = box2.y(v)
        c.add(f'<rect class="bar" data-look="{j + 1}" data-outcome="{done}" x="{x:.1f}" '
              f'y="{y1:.1f}" width="{bw2:.1f}" height="{max(0.5, box2.bottom - y1):.1f}" '
              f'fill="{fills[done]}" stroke="#333333" stroke-width="0.5"><title>look '
              f'{j + 1}, complete, not significant: {num.percent(v, 2)}</title></rect>')
        c.text(box2.x(i + 1), y1 - 4, num.percent(v, num.decimals_for([100 * v], 2)),
               size=10, anchor="middle", cls="bar-label")
        c.text(box2.x(i + 1), box2.bottom + 17, f"look {j + 1}", size=11, anchor="middle",
               cls="tick")
    c.height = c.legend([(OUTCOME_STYLES[o], "bar") for o in (*interim, done)],
                        box.bottom + 40) + 6
    return c.to_svg(f"share of {int(reps):,} simulated experiments stopping at each of "
                    f"{len(rows)} look(s), by outcome")
