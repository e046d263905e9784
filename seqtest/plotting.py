"""matplotlib figures of an analysis and of a simulation.

Both functions return a :class:`matplotlib.figure.Figure` made without pyplot (so a
notebook shows it once, and no global state is left behind) and save it only when a
path is given. Colours, markers and dash patterns are those of
:mod:`seqtest.reporting.style` (the Okabe-Ito palette, with a shape and a dash pattern
per series); legends sit outside the plotting areas; the layout engine keeps every
label inside the figure; the title names the experiment.
"""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from seqtest.core.vocabulary import CAUTION
from seqtest.reporting import numbers as num
from seqtest.reporting.style import OUTCOME_STYLES, SERIES, Series, decision_words
from seqtest.reporting.summary import analysis_record, effect_units

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["plot_analysis", "plot_simulation"]

#: z values beyond this are drawn at the edge of the axes.
Z_CAP = 8.0


def _figure(width: float, height: float) -> Figure:
    """A figure on the Agg canvas (no display, no pyplot), laid out by the constrained
    layout engine, which keeps titles, labels and outside legends in the figure."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=(width, height), dpi=100, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig: Figure, path: str | Path | None) -> None:
    if path is not None:
        fig.savefig(Path(path))


def _style(s: Series, **extra: Any) -> dict:
    out = {"color": s.color, "linestyle": s.mpl_dash, "label": s.label}
    if s.marker:
        out["marker"] = s.marker
    out.update(extra)
    return out


def _finite(values: Any) -> np.ndarray:
    return np.array([float(v) if num.is_number(v) else np.nan for v in values], float)


def plot_analysis(analysis: Any, plan: Any = None, path: str | Path | None = None, *,
                  title: str | None = None) -> Figure:
    """The looks of an analysis: z against the boundaries, and the effect per look.

    Parameters
    ----------
    analysis : Analysis or dict
        The analysis (or its ``to_dict()``).
    plan : Plan, optional
        Adds the planned boundaries (dashed) of a group-sequential plan.
    path : str or Path, optional
        Save the figure there (the format follows the suffix: ``.png``, ``.svg``, ...).
    title : str, optional
        The experiment's name (default ``"Experiment"``).

    Returns
    -------
    matplotlib.figure.Figure
        Top: the z statistic of each look against the efficacy boundaries recomputed at
        the looks taken (markers; both tails of a two-sided plan), the futility band
        (shaded) and the planned boundaries (dashed). Bottom: the effect of each look
        with its interval valid at every look, and the adjusted estimate and interval
        at a stop, in the effect's units (percentage points, percent).
    """
    r = analysis_record(analysis)
    looks = r.get("looks") or []
    if not looks:
        raise ValueError("analysis: got an analysis without looks; allowed is the result "
                         "of seqtest.analyze")
    name = title or "Experiment"
    mixture = r.get("plan_kind") == "mixture"
    sides = int(r.get("sides") or getattr(plan, "sides", 2) or 2)
    fig = _figure(9.0, 7.2)
    ax, bx = fig.subplots(2, 1, height_ratios=[3, 2])
    fig.suptitle(name, fontsize=13, fontweight="bold")
    # the figure shows a decision, so it carries the caution (at the foot, laid out
    # by the layout engine with everything else)
    fig.supxlabel("\n".join(textwrap.wrap(CAUTION, 140)), fontsize=7, color="#555555")
    _z_panel(ax, r, plan, mixture, sides)
    _effect_panel(bx, r, mixture, sides)
    _save(fig, path)
    return fig


def _z_panel(ax: Axes, r: dict, plan: Any, mixture: bool, sides: int) -> None:
    looks = r["looks"]
    frac = [x.get("information_fraction") for x in looks]
    by_size = mixture or not all(num.is_number(f) for f in frac)
    t = np.array([max(x["n_control"], x["n_treatment"]) for x in looks], float) if by_size \
        else np.array(frac, float)
    z = _finite(x.get("z") for x in looks)
    a = np.minimum(_finite(x.get("efficacy_z") if num.is_number(x.get("efficacy_z"))
                           else Z_CAP for x in looks), Z_CAP)
    b = _finite(x.get("futility_z") for x in looks)
    has_fut = bool(np.isfinite(b).any())
    if has_fut:
        band = SERIES["futility_band"]
        floor = -b if sides == 2 else np.full_like(b, -Z_CAP)
        ax.fill_between(t, floor, b, where=np.isfinite(b), color=band.color, alpha=0.22,
                        linewidth=0, label=band.label, step=None)
    if plan is not None and not mixture and not by_size and hasattr(plan, "info_fractions"):
        pt = np.asarray(plan.info_fractions, float)
        pa = np.minimum(np.asarray(plan.efficacy_z, float), Z_CAP)
        ax.plot(pt, pa, lw=1.3, **_style(SERIES["planned_efficacy"]))
        if sides == 2:
            ax.plot(pt, -pa, lw=1.3, color=SERIES["planned_efficacy"].color,
                    linestyle=SERIES["planned_efficacy"].mpl_dash)
        if plan.futility_z is not None:
            pf = np.maximum(np.asarray(plan.futility_z, float), -Z_CAP)
            ax.plot(pt, pf, lw=1.3, **_style(SERIES["planned_futility"]))
            if sides == 2:
                ax.plot(pt, -pf, lw=1.3, color=SERIES["planned_futility"].color,
                        linestyle=SERIES["planned_futility"].mpl_dash)
    ax.plot(t, a, lw=1.8, ms=7, **_style(SERIES["efficacy"]))
    if sides == 2:
        ax.plot(t, -a, lw=1.8, ms=7, **_style(SERIES["efficacy_lower"]))
    if has_fut:
        ax.plot(t, b, lw=1.5, ms=5, **_style(SERIES["futility"]))
        if sides == 2:
            ax.plot(t, -b, lw=1.5, ms=5, color=SERIES["futility"].color,
                    marker=SERIES["futility"].marker, linestyle=SERIES["futility"].mpl_dash)
    ax.plot(t, np.clip(z, -Z_CAP, Z_CAP), lw=2.4, ms=7, zorder=5,
            **_style(SERIES["observed_z"]))
    ax.axhline(0, color="#777777", lw=0.8)
    top = float(min(Z_CAP, np.nanmax(np.abs(np.concatenate([z, a, b, [3.0]]))) * 1.1))
    low = -top if sides == 2 else float(max(-Z_CAP, min(-1.0, np.nanmin(
        np.concatenate([z, b, [0.0]])) * 1.1 - 0.2)))
    ax.set_ylim(low, top)
    xmax = float(t.max()) * 1.06 if by_size else max(1.0, float(t.max())) * 1.04
    ax.set_xlim(0, xmax)
    ax.set_xlabel("units in the larger arm (look at any time)" if by_size
                  else "information fraction (share of the maximum sample)")
    ax.set_ylabel("z statistic")
    ax.grid(alpha=0.25)
    # the decision: in the panel's title (never clipped, never on the data), and a
    # ring around the look it was taken at
    word = decision_words(r.get("decision"), r.get("direction"))
    ax.plot([float(t[-1])], [float(np.clip(z[-1], low, top))], linestyle="none",
            marker="o", ms=15, mfc="none", mec=SERIES["observed_z"].color, mew=1.5,
            color=SERIES["observed_z"].color,
            zorder=6, gid="decision-marker")
    ax.set_title(f"Looks against the stopping boundaries; look {len(looks)}: {word}",
                 fontsize=11)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0,
              fontsize=8, frameon=False)


def _effect_panel(ax: Axes, r: dict, mixture: bool, sides: int) -> None:
    looks = r["looks"]
    units = effect_units(str(r.get("metric_kind") or ""), str(r.get("scale") or
                                                               "difference"))
    f = units.factor
    k = np.arange(1, len(looks) + 1, dtype=float)
    est = _finite(x.get("estimate") for x in looks) * f
    lo = _finite(x.get("interval_lower") for x in looks) * f
    hi = _finite(x.get("interval_upper") for x in looks) * f
    fin = r.get("final") or None
    adjusted = None
    if fin and not mixture and num.is_number(fin.get("median_unbiased")):
        adjusted = tuple(float(fin[key]) * f if num.is_number(fin.get(key)) else np.nan
                         for key in ("median_unbiased", "ci_lower", "ci_upper"))
    values = np.concatenate([est, lo, hi, [0.0], np.array(adjusted or [], float)])
    values = values[np.isfinite(values)]
    vmin, vmax = float(values.min()), float(values.max())
    pad = 0.1 * ((vmax - vmin) or 1.0)
    open_top = bool(np.isnan(hi).any()) or (adjusted is not None and np.isnan(adjusted[2]))
    ylo, yhi = vmin - pad, vmax + (3 if open_top else 1) * pad
    ax.set_ylim(ylo, yhi)
    s_int, s_est, s_adj = SERIES["interval"], SERIES["estimate"], SERIES["adjusted"]
    label = ("confidence sequence (valid however often you look)" if mixture
             else s_int.label)
    top_of = np.where(np.isfinite(hi), hi, yhi)
    ax.vlines(k, lo, top_of, color=s_int.color, lw=2.5, label=label)
    ax.plot(k, lo, linestyle="none", marker="_", ms=12, color=s_int.color)
    ax.plot(k[np.isfinite(hi)], hi[np.isfinite(hi)], linestyle="none", marker="_", ms=12,
            color=s_int.color)
    if np.isnan(hi).any():  # open ends of one-sided intervals
        ax.plot(k[np.isnan(hi)], np.full(int(np.isnan(hi).sum()), yhi), linestyle="none",
                marker="^", ms=8, color=s_int.color, clip_on=False)
    ax.plot(k, est, ms=7, zorder=5, **{**_style(s_est), "linestyle": "none"})
    ticks = list(k)
    labels = [str(int(j)) for j in k]
    if adjusted:
        xa = float(len(looks) + 1)
        m, a_lo, a_hi = adjusted
        ax.vlines([xa], [a_lo], [a_hi if np.isfinite(a_hi) else yhi], color=s_adj.color,
                  lw=2.5)
        if not np.isfinite(a_hi):  # one-sided: open upper end
            ax.plot([xa], [yhi], linestyle="none", marker="^", ms=8, color=s_adj.color,
                    clip_on=False)
        ax.plot([xa], [m], ms=8, zorder=5,
                **{**_style(s_adj), "linestyle": "none"})
        ticks.append(xa)
        labels.append("at stop")
    if len(ticks) > 16:
        step = int(np.ceil(len(ticks) / 16))
        keep = [i for i in range(len(ticks)) if i % step == 0 or i == len(ticks) - 1]
        ticks, labels = [ticks[i] for i in keep], [labels[i] for i in keep]
    ax.set_xticks(ticks, labels)
    ax.set_xlim(0.4, (len(looks) + (1 if adjusted else 0)) + 0.6)
    ax.axhline(0, color="#777777", lw=0.8, linestyle=(0, (4, 3)))
    ax.set_xlabel("look")
    ax.set_ylabel(units.axis.replace(" (", "\n(").replace(", ", ",\n"))
    ax.set_title("The effect at each look", fontsize=11)
    ax.grid(alpha=0.25, axis="y")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0,
              fontsize=8, frameon=False)


def plot_simulation(result: Any, path: str | Path | None = None, *,
                    title: str | None = None) -> Figure:
    """A simulation result: the rejection rate, and where the experiments stopped.

    Parameters
    ----------
    result : SimulationResult or dict
        What :func:`seqtest.simulation.engine.simulate` returned (or its ``to_dict()``).
    path : str or Path, optional
        Save the figure there.
    title : str, optional
        Names the figure (default: the scenario's name).

    Returns
    -------
    matplotlib.figure.Figure
        Left: the plan's rejection rate with its Clopper-Pearson interval beside the
        naive baseline, against alpha (or the plan's power). Middle: the share of
        experiments stopping at each look for efficacy or futility, stacked, with
        hatches. Right: the share that ended without significance, on an axis of its
        own, so that it does not flatten the interim stops.
    """
    r = dict(result) if isinstance(result, dict) else result.to_dict()
    rows = r.get("looks") or []
    reps = float(r.get("reps") or 0)
    if not rows or reps <= 0:
        raise ValueError("result: got a simulation without looks; allowed is the result of "
                         "seqtest.simulation.engine.simulate")
    fig = _figure(11.0, 4.6)
    ax1, ax2, ax3 = fig.subplots(1, 3, width_ratios=[1.0, 2.6, 0.9])
    fig.suptitle(f"{title or r.get('scenario') or 'Simulation'}: {int(reps):,} simulated "
                 "experiments", fontsize=12, fontweight="bold")
    # the rejection rate against what the plan promises
    names, rates, lows, highs = ["plan"], [r["rate"]], [r["ci_lower"]], [r["ci_upper"]]
    if r.get("naive"):
        nv = r["naive"]
        names.append("naive")
        rates.append(nv["rate"])
        lows.append(nv["ci_lower"])
        highs.append(nv["ci_upper"])
    x = np.arange(len(names))
    colours = [SERIES["efficacy"].color, "#999999"][: len(names)]
    ax1.bar(x, rates, color=colours, width=0.6, hatch=["", "//"][: len(names)],
            edgecolor="#333333", linewidth=0.5)
    ax1.errorbar(x, rates, yerr=[np.subtract(rates, lows), np.subtract(highs, rates)],
                 fmt="none", ecolor="black", color="black", capsize=4, lw=1)
    ref = r["plan"]["alpha"] if r.get("null") else r.get("design_rate")
    ref_line = []
    if ref is not None:
        ref_line = [ax1.axhline(ref, color="black", linestyle=(0, (4, 3)), lw=1,
                                label=f"alpha {ref:g}" if r.get("null")
                                else f"planned power {ref:.3f}")]
    top1 = max(max(highs) * 1.3, (ref or 0) * 1.3, 1e-3)
    ax1.set_ylim(0, top1)
    for xi, v, h in zip(x, rates, highs, strict=True):
        ax1.annotate(f"{v:.4f}", (xi, h), textcoords="offset points", xytext=(0, 3),
                     ha="center", va="bottom", fontsize=8)
    ax1.set_xticks(x, names)
    ax1.set_ylabel("type I error" if r.get("null") else "rejection rate")
    ax1.set_title(str(r.get("verdict", "")), fontsize=9)
    # interim stops: efficacy and futility, on their own axis
    interim = ("stop_efficacy_upper", "stop_efficacy_lower", "stop_futility")
    share = {o: np.array([float(row.get(o) or 0) / reps for row in rows]) for o in
             (*interim, "complete_not_significant")}
    looks = np.arange(1, len(rows) + 1)
    bottom = np.zeros(len(rows))
    for o in interim:
        s = OUTCOME_STYLES[o]
        ax2.bar(looks, share[o], bottom=bottom, color=s.color, hatch=s.hatch, width=0.7,
                edgecolor="#333333", linewidth=0.5, label=s.label)
        bottom += share[o]
    ax2.set_ylim(0, max(float(bottom.max()) * 1.18, 1e-3))
    ax2.set_xlabel("look (mean information fraction)")
    step = max(1, len(rows) // 12)
    ticks = looks[::step]
    fr = [row.get("mean_fraction") for row in rows]
    ax2.set_xticks(ticks, [f"{j}\n({fr[j - 1]:.2f})" if num.is_number(fr[j - 1]) else str(j)
                           for j in ticks], fontsize=7)
    ax2.set_ylabel("share of experiments stopping")
    ax2.set_title(f"stops for efficacy or futility (expected total {r['expected_total']:,.0f}"
                  f" of {r['max_total']:,.0f})", fontsize=10)
    ax2.yaxis.set_major_formatter(_percent_formatter())
    # the experiments that ended without significance, on a separate axis
    done = share["complete_not_significant"]
    where = np.flatnonzero(done > 0)
    s = OUTCOME_STYLES["complete_not_significant"]
    xs = np.arange(1, where.size + 1)
    ax3.bar(xs, done[where], color=s.color, hatch=s.hatch, width=0.6, edgecolor="#333333",
            linewidth=0.5, label=s.label)
    for xi, v in zip(xs, done[where], strict=True):
        ax3.annotate(num.percent(v, num.decimals_for([100 * v], 2)), (xi, v),
                     textcoords="offset points", xytext=(0, 3), ha="center", fontsize=8)
    ax3.set_xticks(xs, [f"look {j + 1}" for j in where])
    ax3.set_xlim(0.3, max(1, where.size) + 0.7)
    ax3.set_ylim(0, max(float(done.max()) * 1.2, 1e-3))
    ax3.set_title("no significance", fontsize=10)
    ax3.yaxis.set_major_formatter(_percent_formatter())
    handles = [*ref_line, *ax2.get_legend_handles_labels()[0],
               *ax3.get_legend_handles_labels()[0]]
    fig.legend(handles=handles, loc="outside lower center", ncols=len(handles), fontsize=8,
               frameon=False)
    _save(fig, path)
    return fig


def _percent_formatter() -> Any:
    from matplotlib.ticker import PercentFormatter
    return PercentFormatter(xmax=1.0, decimals=None)
