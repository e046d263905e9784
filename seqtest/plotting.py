"""Figures (matplotlib, Agg backend). Imported by the command line only."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["plot_analysis"]


def plot_analysis(analysis: Any, plan: Any, path: str | Path) -> Path:
    """Draw the z path of the looks against the boundaries; write a PNG to ``path``.

    The planned boundaries are drawn thin and dashed; the boundaries recomputed on
    the observed information fractions are drawn as markers at each look.
    """
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    looks = analysis.looks
    mixture = getattr(analysis, "plan_kind", "") == "mixture"
    if mixture:
        t = np.array([max(x.n_control, x.n_treatment) for x in looks], float)
    else:
        t = np.array([x.information_fraction for x in looks])
    z = np.array([x.z for x in looks])
    a = np.array([x.efficacy_z for x in looks])
    fut = [x.futility_z for x in looks]
    fig, ax = plt.subplots(figsize=(7.5, 4.8), dpi=110)
    sides = getattr(plan, "sides", 2)
    pt = None if mixture else getattr(plan, "info_fractions", None)
    cap = 6.0
    if pt is not None:
        pa = np.minimum(plan.efficacy_z, cap)
        ax.plot(pt, pa, ls="--", lw=1, color="tab:green", alpha=0.6, label="planned efficacy")
        if sides == 2:
            ax.plot(pt, -pa, ls="--", lw=1, color="tab:green", alpha=0.6)
        if plan.futility_z is not None:
            pf = np.maximum(plan.futility_z, -cap)
            ax.plot(pt, pf, ls="--", lw=1, color="tab:red", alpha=0.6, label="planned futility")
            if sides == 2:
                ax.plot(pt, -pf, ls="--", lw=1, color="tab:red", alpha=0.6)
    ac = np.minimum(a, cap)
    ax.plot(t, ac, "v-", color="tab:green", label="efficacy boundary (observed looks)")
    if sides == 2:
        ax.plot(t, -ac, "^-", color="tab:green")
    if any(f is not None for f in fut):
        fz = np.array([np.nan if f is None else max(f, -cap) for f in fut])
        ax.plot(t, fz, "s-", ms=4, color="tab:red", label="futility boundary")
        if sides == 2:
            ax.plot(t, -fz, "s-", ms=4, color="tab:red")
    ax.plot(t, z, "o-", color="black", lw=2, label="observed z")
    ax.axhline(0, color="grey", lw=0.6)
    last = looks[-1]
    words = {"continue": "continue", "stop_efficacy": "stop: efficacy",
             "stop_futility": "stop: futility",
             "complete_not_significant": "complete: not significant"}
    ax.annotate(words.get(analysis.decision, analysis.decision),
                (float(t[-1]), last.z), textcoords="offset points",
                xytext=(8, 8), fontsize=10, weight="bold")
    if mixture:
        ax.set_xlim(0, float(t.max()) * 1.08)
        ax.set_xlabel("units in the larger arm (look at any time)")
    else:
        ax.set_xlim(0, max(1.02, float(t.max()) + 0.02))
        ax.set_xlabel("information fraction")
    ax.set_ylabel("z statistic (treatment - control)")
    ax.set_title("Looks against the stopping boundaries")
    ax.legend(loc="best", fontsize=8, frameon=False)
    ax.grid(alpha=0.25)
    fig.tight_layout()
    out = Path(path)
    fig.savefig(out)
    plt.close(fig)
    return out
