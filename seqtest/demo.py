"""The bundled demo behind ``seqtest demo``: plan, looks, decision, service.

It designs the plan of ``examples/checkout_plan.sh``, analyses
``examples/checkout_looks.csv``, writes the plan, the analysis and a plot to an
output folder, then (unless asked not to) starts the HTTP service on a local SQLite
file on a loopback port, posts the same looks through it, and prints the service's
decision, which must agree with the library's.
"""

from __future__ import annotations

import json
from pathlib import Path

__all__ = ["run_demo", "examples_dir", "DEMO_PLAN"]

DEMO_PLAN = dict(alpha=0.05, sides=2, power=0.9, looks=5, efficacy="obrien-fleming-type",
                 futility="obrien-fleming-type",
                 metric={"kind": "binary", "baseline": 0.08, "mde": 0.012})


def examples_dir() -> Path:
    """The ``examples/`` folder of the source tree."""
    here = Path(__file__).resolve().parent.parent / "examples"
    if not (here / "checkout_looks.csv").exists():
        raise ValueError(f"demo: the example files are not at {here}; run the demo from "
                         "a checkout of the seqtest repository")
    return here


def run_demo(out_dir: Path, use_service: bool = True) -> int:
    """Run the demo, printing as it goes; returns an exit status."""
    import seqtest
    from seqtest.cli import _table, analysis_text, plan_rows, plan_summary
    from seqtest.lookfile import read_looks_csv
    from seqtest.plotting import plot_analysis

    out_dir.mkdir(parents=True, exist_ok=True)
    ex = examples_dir()
    print("seqtest demo: an invented tea shop tests a one-page checkout (binary metric).")
    print()
    plan = seqtest.design(**DEMO_PLAN)
    (out_dir / "plan.json").write_text(json.dumps(plan.to_dict(), indent=2))
    print(plan_summary(plan))
    print()
    print(_table(*plan_rows(plan)))
    print()
    looks = read_looks_csv(ex / "checkout_looks.csv", "binary")
    for upto in range(1, len(looks) + 1):
        analysis = seqtest.analyze(plan, looks[:upto], daily_traffic=1700)
        if analysis.decision != "continue" or upto == len(looks):
            break
    print(f"Analysis of the looks in {ex / 'checkout_looks.csv'}:")
    print(analysis_text(analysis))
    (out_dir / "analysis.json").write_text(json.dumps(analysis.to_dict(), indent=2))
    plot_analysis(analysis, plan, out_dir / "looks.png")
    print(f"\nwrote {out_dir / 'plan.json'}, {out_dir / 'analysis.json'}, "
          f"{out_dir / 'looks.png'}")
    if not use_service:
        return 0
    try:
        from service.demo import post_demo_looks
    except ImportError:
        print("\n(the HTTP service is not installed; skipped that part)")
        return 0
    print("\nThe same looks through the HTTP service (SQLite in the output folder):")
    decision = post_demo_looks(plan.to_dict(), looks[:upto], out_dir / "demo.db")
    print(f"  service decision: {decision}")
    if decision != analysis.decision:
        print("  MISMATCH between the service and the library")
        return 1
    print("  agrees with the library")
    return 0
