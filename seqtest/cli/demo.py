"""``seqtest demo``: the bundled example end to end (plan, looks, decision, service).

It designs the plan of ``examples/checkout_plan.sh``, analyses
``examples/checkout_looks.csv``, writes the plan, the analysis and a plot to an output
folder, then hands the same looks to every installed extension that offers a demo
(entry-point group ``seqtest.demos``: the HTTP service posts them through a real
loopback server on a local SQLite file) and checks that its decision agrees with the
library's.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

__all__ = ["DEMO_PLAN", "DEMO_GROUP", "examples_dir", "register", "run_demo"]

#: Entry-point group of extensions with a demo: a callable
#: ``demo(plan_document, looks, out_dir) -> decision``.
DEMO_GROUP = "seqtest.demos"

DEMO_PLAN: dict[str, Any] = dict(alpha=0.05, sides=2, power=0.9, looks=5,
                                 efficacy="obrien-fleming-type",
                                 futility="obrien-fleming-type",
                                 metric={"kind": "binary", "baseline": 0.08, "mde": 0.012})


def register(sub: Any) -> None:
    """Add the ``demo`` subcommand."""
    d = sub.add_parser("demo", help="run the bundled example end to end (plan, looks, "
                                    "decision, service on SQLite)")
    d.add_argument("--out", default="seqtest-demo", help="folder for the demo's files")
    d.add_argument("--no-service", action="store_true",
                   help="skip the part that goes through the HTTP service")
    d.set_defaults(func=cmd_demo)


def cmd_demo(args: argparse.Namespace) -> int:
    return run_demo(out_dir=Path(args.out), use_service=not args.no_service)


def examples_dir() -> Path:
    """The ``examples/`` folder of the source tree."""
    here = Path(__file__).resolve().parents[2] / "examples"
    if not (here / "checkout_looks.csv").exists():
        raise ValueError(f"demo: the example files are not at {here}; run the demo from "
                         "a checkout of the seqtest repository")
    return here


def run_demo(out_dir: Path, use_service: bool = True) -> int:
    """Run the demo, printing as it goes; returns an exit status."""
    from importlib.metadata import entry_points

    from seqtest.cli.analyze import analysis_text
    from seqtest.cli.common import table
    from seqtest.cli.plan import plan_rows, plan_summary
    from seqtest.monitoring.analysis import analyze
    from seqtest.monitoring.lookfile import read_looks_csv
    from seqtest.planning.design import design
    from seqtest.plotting import plot_analysis

    out_dir.mkdir(parents=True, exist_ok=True)
    ex = examples_dir()
    print("seqtest demo: an invented tea shop tests a one-page checkout (binary metric).")
    print()
    plan = design(**DEMO_PLAN)
    (out_dir / "plan.json").write_text(json.dumps(plan.to_dict(), indent=2))
    print(plan_summary(plan))
    print()
    print(table(*plan_rows(plan)))
    print()
    looks = read_looks_csv(ex / "checkout_looks.csv", "binary")
    upto = 1
    for upto in range(1, len(looks) + 1):
        analysis = analyze(plan, looks[:upto], daily_traffic=1700)
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
    demos = sorted(entry_points(group=DEMO_GROUP), key=lambda e: e.name)
    if not demos:
        print("\n(no extension with a demo is installed, e.g. the HTTP service; skipped)")
        return 0
    status = 0
    for ep in demos:
        try:
            run = ep.load()
        except ImportError as exc:
            print(f"\n(the {ep.name} extension is not usable: {exc}; skipped)")
            continue
        print(f"\nThe same looks through the {ep.name} (SQLite in the output folder):")
        decision = run(plan.to_dict(), looks[:upto], out_dir)
        print(f"  {ep.name} decision: {decision}")
        if decision != analysis.decision:
            print(f"  MISMATCH between the {ep.name} and the library")
            status = 1
        else:
            print("  agrees with the library")
    return status
