"""The ``seqtest`` command.

Subcommands: ``plan`` (design a stopping plan), ``analyze`` (decide on the looks so
far), ``simulate`` (check a plan's error rates by simulation), ``serve`` and
``keys`` (the HTTP service), ``demo`` (everything on a bundled example).

Bad input gives a one-line message on stderr and exit status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import Any

from seqtest.monitor import CAUTION

__all__ = ["main", "build_parser"]

EXAMPLES = Path(__file__).resolve().parent / "examples"


class UsageError(Exception):
    """Bad input spotted by the command line itself."""


# -- formatting ----------------------------------------------------------------------

def _fmt(x: Any, digits: int = 4) -> str:
    if x is None:
        return "-"
    if isinstance(x, str):
        return x
    if isinstance(x, (int,)) and not isinstance(x, bool):
        return str(x)
    v = float(x)
    if v.is_integer() and abs(v) >= 100:
        return f"{int(v)}"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if math.isnan(v):
        return "-"
    if v != 0 and (abs(v) < 1e-3 or abs(v) >= 1e6):
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}f}"


def _table(headers: list[str], rows: list[list[Any]]) -> str:
    cells = [headers] + [[_fmt(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _write(text: str, target: str) -> None:
    if target == "-":
        sys.stdout.write(text if text.endswith("\n") else text + "\n")
    else:
        Path(target).write_text(text if text.endswith("\n") else text + "\n")


# -- plan --------------------------------------------------------------------------

def _fractions(text: str | None) -> list[float] | None:
    if text is None:
        return None
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise UsageError(f"--fractions: got {text!r}; give comma-separated numbers such "
                         "as 0.25,0.5,1") from None


def _metric(args: argparse.Namespace) -> dict | None:
    if args.metric is None:
        for opt in ("baseline", "mde", "sd"):
            if getattr(args, opt) is not None:
                raise UsageError(f"--{opt} needs --metric (binary, continuous or rate)")
        return None
    m: dict = {"kind": args.metric}
    if args.mde is None:
        raise UsageError("--mde: the minimum detectable effect is needed with --metric")
    m["mde"] = args.mde
    for opt in ("baseline", "sd"):
        if getattr(args, opt) is not None:
            m[opt] = getattr(args, opt)
    if args.relative:
        m["relative"] = True
    if args.scale:
        m["scale"] = args.scale
    m["allocation"] = args.allocation
    return m


def make_plan(args: argparse.Namespace) -> Any:
    """Design the plan described by the ``plan`` options (also used by ``demo``)."""
    import seqtest
    return seqtest.design(alpha=args.alpha, sides=args.sides, power=args.power,
                          looks=args.looks, info_fractions=_fractions(args.fractions),
                          efficacy=args.efficacy, futility=args.futility,
                          binding=args.binding, metric=_metric(args))


def plan_rows(plan: Any) -> tuple[list[str], list[list[Any]]]:
    headers = ["look", "info_fraction", "efficacy_z", "nominal_p", "cum_alpha", "futility_z"]
    ss = plan.sample_size() if plan.metric else None
    if ss is not None:
        headers += ["n_control", "n_treatment"]
    rows = []
    for k in range(plan.looks):
        row: list[Any] = [k + 1, plan.info_fractions[k], plan.efficacy_z[k],
                          plan.nominal_p[k], plan.cumulative_alpha[k],
                          None if plan.futility_z is None else plan.futility_z[k]]
        if ss is not None:
            row += [int(ss.per_look_control[k]), int(ss.per_look_treatment[k])]
        rows.append(row)
    return headers, rows


def plan_summary(plan: Any) -> str:
    side = "two-sided" if plan.sides == 2 else "one-sided"
    lines = [f"Plan: {plan.looks} look(s), {side} alpha {plan.alpha:g}, power {plan.power:g}",
             f"  efficacy: {plan.efficacy.label}",
             (f"  futility: {plan.futility.label} "
              f"({'binding' if plan.binding else 'non-binding'})")
             if plan.futility is not None else "  futility: none",
             f"  inflation over the fixed design: {plan.inflation:.4f}"]
    if plan.metric:
        ss = plan.sample_size()
        e0 = plan.characteristics(0.0).expected_fraction
        e1 = plan.characteristics(1.0).expected_fraction
        lines.append(f"  maximum per arm: control {ss.n_control}, treatment {ss.n_treatment} "
                     f"(fixed design: {ss.fixed_control}, {ss.fixed_treatment})")
        lines.append(f"  expected total: {ss.expected_null:,.0f} if no effect "
                     f"({e0:.0%} of max), {ss.expected_alternative:,.0f} at the design "
                     f"effect ({e1:.0%} of max)")
    return "\n".join(lines)


def make_mixture_plan(args: argparse.Namespace) -> Any:
    from seqtest.mixture import mixture_plan
    for opt, default in (("looks", None), ("fractions", None), ("futility", None)):
        if getattr(args, opt) != default:
            raise UsageError(f"--{opt} has no meaning for a mixture plan, which may be "
                             "looked at any time")
    return mixture_plan(alpha=args.alpha, sides=args.sides, metric=_metric(args),
                        max_n_per_arm=args.max_n_per_arm, tau2=args.tau2)


def mixture_summary(plan: Any) -> str:
    side = "two-sided" if plan.sides == 2 else "one-sided"
    lines = [f"Plan: mixture SPRT (look at any time), {side} alpha {plan.alpha:g}",
             f"  mixing variance tau^2 = {plan.tau2:.6g} (chosen by rule: {plan.tau2_rule})"]
    if plan.mde is not None:
        lines.append(f"  tuned to the minimum detectable effect {plan.mde:g} "
                     f"({plan.scale} scale)")
    if plan.max_n_per_arm:
        lines.append(f"  complete at {plan.max_n_per_arm} per arm without a rejection")
    return "\n".join(lines)


def cmd_plan(args: argparse.Namespace) -> int:
    if args.kind == "mixture":
        plan = make_mixture_plan(args)
        if args.json:
            _write(json.dumps(plan.to_dict(), indent=2, allow_nan=False), args.json)
        if args.csv:
            raise UsageError("--csv: a mixture plan has no table of looks; use --json")
        if args.json != "-":
            print(mixture_summary(plan))
            print(f"\nNote: {CAUTION}")
        return 0
    if args.max_n_per_arm is not None or args.tau2 is not None:
        raise UsageError("--max-n-per-arm and --tau2 are for --kind mixture")
    plan = make_plan(args)
    if args.json:
        _write(json.dumps(plan.to_dict(), indent=2, allow_nan=False), args.json)
    if args.csv:
        import csv
        import io
        headers, rows = plan_rows(plan)
        buf = io.StringIO()
        w = csv.writer(buf)
        w.writerow(headers)
        for row in rows:
            w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, float) else v)
                        for v in row])
        _write(buf.getvalue(), args.csv)
    if args.json != "-" and args.csv != "-":
        headers, rows = plan_rows(plan)
        print(plan_summary(plan))
        print()
        print(_table(headers, rows))
        print()
        print(f"Note: {CAUTION}")
    return 0


# -- analyze -------------------------------------------------------------------------

def _read_plan(path: str) -> Any:
    import seqtest
    p = Path(path)
    if not p.exists():
        raise UsageError(f"--plan: {p} does not exist; write one with 'seqtest plan --json'")
    try:
        doc = json.loads(p.read_text())
    except json.JSONDecodeError as exc:
        raise UsageError(f"--plan: {p} is not valid JSON ({exc.msg} at line {exc.lineno})") \
            from None
    return seqtest.plan_from_dict(doc)


def analysis_text(analysis: Any) -> str:
    d = analysis.to_dict()
    looks = d["looks"]
    ci = ("cs_lower", "cs_upper") if d.get("plan_kind") == "mixture" else ("rci_lower",
                                                                          "rci_upper")
    headers = ["look", "n_control", "n_treatment", "estimate", "se", "z", "info_frac",
               "efficacy_z", "futility_z", ci[0], ci[1], "decision"]
    rows = [[x["look"], x["n_control"], x["n_treatment"], x["estimate"], x["se"], x["z"],
             x["information_fraction"], x["efficacy_z"], x.get("futility_z"),
             x.get("rci_lower"), x.get("rci_upper"), x["decision"]] for x in looks]
    out = [_table(headers, rows), ""]
    dec = d["decision"]
    words = {
        "continue": "CONTINUE: no boundary crossed; keep collecting data",
        "stop_efficacy": "STOP for efficacy",
        "stop_futility": "STOP for futility: the effect is unlikely to reach significance",
        "complete_not_significant": "COMPLETE: final look reached without significance",
    }
    line = f"Decision at look {looks[-1]['look']}: {words.get(dec, dec)}"
    if d.get("direction"):
        line += f" ({d['direction'].replace('_', ' ')})"
    out.append(line)
    fin = d.get("final")
    mixture = d.get("plan_kind") == "mixture"
    if fin:
        p_label = "always-valid p-value" if mixture else "adjusted p-value (stage-wise ordering)"
        ci_label = "confidence sequence" if mixture else "adjusted interval"
        out.append(f"  {p_label}: {_fmt(fin['p_value'])}   "
                   f"unadjusted: {_fmt(fin['naive_p_value'])}")
        out.append(f"  {ci_label}: [{_fmt(fin['ci_lower'])}, {_fmt(fin['ci_upper'])}]"
                   f"   unadjusted: [{_fmt(fin['naive_ci_lower'])}, "
                   f"{_fmt(fin['naive_ci_upper'])}]")
        if not mixture:
            out.append(f"  median-unbiased estimate: {_fmt(fin['median_unbiased'])}   "
                       f"naive estimate: {_fmt(fin['naive_estimate'])}")
    proj = d.get("projection")
    if proj:
        out.append(f"  conditional power: {_fmt(proj['conditional_power_planned'], 3)} at the "
                   f"planned effect, {_fmt(proj['conditional_power_current'], 3)} at the "
                   "current estimate")
        if proj.get("more_units_to_next_look") is not None:
            msg = (f"  next planned look at fraction {proj['next_look_fraction']:.2f}: "
                   f"{proj['more_units_to_next_look']:,.0f} more units over both arms")
            if proj.get("days_to_next_look") is not None:
                msg += f" (about {proj['days_to_next_look']:.1f} days)"
            out.append(msg)
    for w in d.get("warnings", []):
        out.append(f"warning: {w}")
    out.append("")
    out.append(f"Note: {CAUTION}")
    return "\n".join(out)


def cmd_analyze(args: argparse.Namespace) -> int:
    from seqtest.lookfile import read_looks_csv
    from seqtest.monitor import analyze
    plan = _read_plan(args.plan)
    kind = (getattr(plan, "metric", None) or {}).get("kind") or args.metric
    looks = read_looks_csv(args.looks, kind)
    analysis = analyze(plan, looks, metric=args.metric, final=args.final, max_n=args.max_n,
                       daily_traffic=args.daily_traffic, fraction=args.fraction)
    if args.json:
        _write(json.dumps(analysis.to_dict(), indent=2, allow_nan=False), args.json)
    if args.json != "-":
        print(analysis_text(analysis))
    if args.plot:
        from seqtest.plotting import plot_analysis
        plot_analysis(analysis, plan, args.plot)
        if args.json != "-":
            print(f"plot written to {args.plot}")
    return 0


# -- demo ----------------------------------------------------------------------------

def cmd_demo(args: argparse.Namespace) -> int:
    from seqtest.demo import run_demo
    return run_demo(out_dir=Path(args.out), use_service=not args.no_service)


# -- parser --------------------------------------------------------------------------

def _add_plan_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--alpha", type=float, default=0.05, help="overall type I error (0.05)")
    p.add_argument("--sides", type=int, default=2, choices=(1, 2),
                   help="1: one-sided, 2: symmetric two-sided (default)")
    p.add_argument("--power", type=float, default=0.9, help="power at the design effect (0.9)")
    p.add_argument("--looks", type=int, default=None, help="equally spaced looks (5)")
    p.add_argument("--fractions", default=None,
                   help="comma-separated information fractions, ending at 1")
    p.add_argument("--efficacy", default="obrien-fleming-type",
                   help="obrien-fleming-type (default), pocock-type, hsd:<gamma>, "
                        "power:<rho>, or classical obrien-fleming, pocock, "
                        "wang-tsiatis:<Delta>, haybittle-peto")
    p.add_argument("--futility", default=None,
                   help="beta-spending function for a futility boundary (as --efficacy's "
                        "spending names); none by default")
    p.add_argument("--binding", action="store_true",
                   help="make the futility boundary binding (default: non-binding)")
    p.add_argument("--metric", choices=("binary", "continuous", "rate"), default=None,
                   help="metric kind, for sample sizes")
    p.add_argument("--baseline", type=float, default=None,
                   help="control rate (binary, rate) or mean (continuous)")
    p.add_argument("--mde", type=float, default=None, help="minimum detectable effect")
    p.add_argument("--relative", action="store_true", help="--mde is relative to baseline")
    p.add_argument("--sd", type=float, default=None, help="standard deviation (continuous)")
    p.add_argument("--allocation", type=float, default=1.0,
                   help="treatment users per control user (1)")
    p.add_argument("--scale", choices=("difference", "relative"), default=None,
                   help="analysis scale of the effect (difference)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="seqtest",
        description="Sequential testing for controlled experiments: plan the looks, "
                    "decide at each one, check the error rates by simulation.",
        epilog=CAUTION)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("plan", help="design a stopping plan and print its boundaries")
    p.add_argument("--kind", choices=("group-sequential", "mixture"),
                   default="group-sequential",
                   help="group-sequential looks (default) or a mixture SPRT for looking "
                        "at any time")
    _add_plan_options(p)
    p.add_argument("--max-n-per-arm", type=int, default=None, dest="max_n_per_arm",
                   help="mixture: stop without significance when an arm reaches this")
    p.add_argument("--tau2", type=float, default=None,
                   help="mixture: mixing variance (default: tuned to --mde)")
    p.add_argument("--json", metavar="FILE", default=None,
                   help="write the plan document (JSON) to FILE ('-' for stdout)")
    p.add_argument("--csv", metavar="FILE", default=None,
                   help="write the boundary table as CSV to FILE ('-' for stdout)")
    p.set_defaults(func=cmd_plan)

    a = sub.add_parser("analyze", help="analyse the looks so far and give the decision")
    a.add_argument("looks", help="CSV file, one row per look (see 'seqtest analyze --help')")
    a.add_argument("--plan", required=True, help="plan document from 'seqtest plan --json'")
    a.add_argument("--metric", choices=("binary", "continuous", "rate"), default=None,
                   help="metric kind when the plan has none")
    a.add_argument("--final", action="store_true",
                   help="declare the last look final (spend all remaining alpha)")
    a.add_argument("--max-n", type=float, default=None, dest="max_n",
                   help="maximum total over both arms, when the plan has no metric")
    a.add_argument("--fraction", choices=("sample", "information"), default="sample",
                   help="measure information fractions by sample size (default) or by "
                        "statistical information")
    a.add_argument("--daily-traffic", type=float, default=None, dest="daily_traffic",
                   help="users per day over both arms, to project days to the next look")
    a.add_argument("--json", metavar="FILE", default=None,
                   help="write the analysis (JSON) to FILE ('-' for stdout)")
    a.add_argument("--plot", metavar="FILE.png", default=None,
                   help="draw the z path against the boundaries")
    a.set_defaults(func=cmd_analyze)

    d = sub.add_parser("demo", help="run the bundled example end to end (plan, looks, "
                                    "decision, service on SQLite)")
    d.add_argument("--out", default="seqtest-demo", help="folder for the demo's files")
    d.add_argument("--no-service", action="store_true",
                   help="skip the part that goes through the HTTP service")
    d.set_defaults(func=cmd_demo)

    try:
        from seqtest.cli_simulate import add_subcommand as add_simulate
    except ImportError:
        add_simulate = None
    if add_simulate is not None:
        add_simulate(sub)
    try:
        from service.commands import add_subcommands as add_service
    except ImportError:
        add_service = None
    if add_service is not None:
        add_service(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except (UsageError, ValueError) as exc:
        print(f"seqtest {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("seqtest: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
