"""``seqtest plan``: design a stopping plan, print its boundaries, write its document."""

from __future__ import annotations

import argparse
import json
import warnings
from typing import Any

from seqtest.cli.common import UsageError, table, write
from seqtest.core.vocabulary import BETTER, CAUTION, HYPOTHESES, METRIC_KINDS

__all__ = ["make_plan", "plan_rows", "plan_summary", "register"]


def register(sub: Any) -> None:
    """Add the ``plan`` subcommand."""
    p = sub.add_parser("plan", help="design a stopping plan and print its boundaries")
    p.add_argument("--kind", choices=("group_sequential", "mixture", "group-sequential"),
                   default="group_sequential",
                   help="group_sequential looks (default) or a mixture SPRT for looking "
                        "at any time")
    add_plan_options(p)
    p.add_argument("--max-n-per-arm", type=int, default=None, dest="max_n_per_arm",
                   help="mixture: stop without significance when an arm reaches this")
    p.add_argument("--tau2", type=float, default=None,
                   help="mixture: mixing variance (default: tuned to --mde)")
    p.add_argument("--json", metavar="FILE", default=None,
                   help="write the plan document (JSON) to FILE ('-' for stdout)")
    p.add_argument("--csv", metavar="FILE", default=None,
                   help="write the boundary table as CSV to FILE ('-' for stdout)")
    from seqtest.cli.experiment import add_experiment_options
    add_experiment_options(p)
    p.set_defaults(func=cmd_plan)


def add_plan_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--alpha", type=float, default=0.05, help="overall type I error (0.05)")
    p.add_argument("--sides", type=int, default=2, choices=(1, 2),
                   help="1: one-sided, 2: symmetric two-sided (default)")
    p.add_argument("--power", type=float, default=0.9, help="power at the design effect (0.9)")
    p.add_argument("--looks", type=int, default=None, help="equally spaced looks (5)")
    p.add_argument("--information-fractions", "--fractions", default=None,
                   dest="information_fractions",
                   help="comma-separated information fractions, ending at 1 "
                        "(--fractions: the first release's name)")
    p.add_argument("--efficacy", default="obrien-fleming-type",
                   help="obrien-fleming-type (default), pocock-type, hsd:<gamma>, "
                        "power:<rho>, or classical obrien-fleming, pocock, "
                        "wang-tsiatis:<Delta>, haybittle-peto")
    p.add_argument("--futility", default=None,
                   help="beta-spending function for a futility boundary (as --efficacy's "
                        "spending names); none by default")
    p.add_argument("--binding", action="store_true",
                   help="make the futility boundary binding (default: non-binding)")
    p.add_argument("--metric", choices=METRIC_KINDS, default=None,
                   help="metric kind, for sample sizes")
    p.add_argument("--baseline", type=float, default=None,
                   help="control rate (binary, rate), mean (continuous, adjusted) or mean "
                        "count per unit (count)")
    p.add_argument("--mde", type=float, default=None,
                   help="minimum detectable effect: the true effect the plan is powered "
                        "for (with a margin it may be 0: no true difference)")
    p.add_argument("--relative", action="store_true", help="--mde is relative to baseline")
    p.add_argument("--sd", type=float, default=None,
                   help="standard deviation (continuous, adjusted; count: of the per-unit "
                        "counts)")
    p.add_argument("--allocation", type=float, default=1.0,
                   help="treatment users per control user (1)")
    p.add_argument("--scale", choices=("difference", "relative"), default=None,
                   help="analysis scale of the effect (difference)")
    p.add_argument("--correlation", type=float, default=None,
                   help="adjusted: expected correlation of the metric with its pre-period "
                        "covariate")
    p.add_argument("--dispersion", type=float, default=None,
                   help="count: negative binomial shape k of the per-unit counts (variance "
                        "mean + mean^2/k), instead of --sd")
    for name, what in (("numerator-mean", "mean numerator per unit"),
                       ("denominator-mean", "mean denominator per unit"),
                       ("numerator-sd", "sd of the numerator per unit"),
                       ("denominator-sd", "sd of the denominator per unit"),
                       ("covariance", "covariance of numerator and denominator per unit")):
        p.add_argument(f"--{name}", type=float, default=None,
                       dest=name.replace("-", "_"), help=f"ratio: a pilot's {what}")
    p.add_argument("--margin", type=float, default=None,
                   help="null value of the effect on the analysis scale for a test against "
                        "a margin (e.g. -0.01: not worse by more than 1 point); needs "
                        "--hypothesis")
    p.add_argument("--better", choices=BETTER, default=None,
                   help="which way of the metric is good (higher)")
    p.add_argument("--hypothesis", choices=HYPOTHESES, default=None,
                   help="what a test against --margin is to show: non_inferiority or "
                        "superiority (by more than the margin)")



def _fractions(text: str | None) -> list[float] | None:
    if text is None:
        return None
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise UsageError(f"--information-fractions: got {text!r}; give comma-separated "
                         "numbers such as 0.25,0.5,1") from None


#: Metric options passed to the metric description as they are (their kinds are
#: checked by seqtest.planning.sizing.check_metric, which names the field at fault).
_METRIC_OPTIONS = ("baseline", "sd", "correlation", "dispersion", "numerator_mean",
                   "denominator_mean", "numerator_sd", "denominator_sd", "covariance",
                   "margin", "better", "hypothesis")


def _metric(args: argparse.Namespace) -> dict | None:
    if args.metric is None:
        for opt in ("mde", *_METRIC_OPTIONS):
            if getattr(args, opt, None) is not None:
                raise UsageError(f"--{opt.replace('_', '-')} needs --metric "
                                 f"({', '.join(METRIC_KINDS)})")
        return None
    m: dict = {"kind": args.metric}
    if args.mde is None:
        raise UsageError("--mde: the minimum detectable effect is needed with --metric")
    m["mde"] = args.mde
    for opt in _METRIC_OPTIONS:
        if getattr(args, opt, None) is not None:
            m[opt] = getattr(args, opt)
    if args.relative:
        m["relative"] = True
    if args.scale:
        m["scale"] = args.scale
    m["allocation"] = args.allocation
    return m


def make_plan(args: argparse.Namespace) -> Any:
    """Design the plan described by the ``plan`` options (also used by ``demo``)."""
    from seqtest.planning.design import design
    return design(alpha=args.alpha, sides=args.sides, power=args.power, looks=args.looks,
                  info_fractions=_fractions(args.information_fractions),
                  efficacy=args.efficacy, futility=args.futility, binding=args.binding,
                  metric=_metric(args))


def plan_rows(plan: Any) -> tuple[list[str], list[list[Any]]]:
    """The boundary table: one row per planned look (names as in the glossary)."""
    headers = ["look", "information_fraction", "efficacy_z", "p_threshold",
               "cumulative_alpha", "futility_z"]
    ss = plan.sample_size() if plan.metric else None
    if ss is not None:
        headers += ["n_control", "n_treatment"]
    rows = []
    for k in range(plan.looks):
        row: list[Any] = [k + 1, plan.info_fractions[k], plan.efficacy_z[k],
                          plan.p_threshold[k], plan.cumulative_alpha[k],
                          None if plan.futility_z is None else plan.futility_z[k]]
        if ss is not None:
            row += [int(ss.per_look_control[k]), int(ss.per_look_treatment[k])]
        rows.append(row)
    return headers, rows


def plan_summary(plan: Any) -> str:
    """The plan in a few plain lines (:func:`seqtest.reporting.plan_summary`)."""
    from seqtest.reporting.summary import plan_summary as summary
    return summary(plan)


def make_mixture_plan(args: argparse.Namespace) -> Any:
    from seqtest.planning.mixture import mixture_plan
    for opt, default in (("looks", None), ("information_fractions", None), ("futility", None)):
        if getattr(args, opt) != default:
            raise UsageError(f"--{opt} has no meaning for a mixture plan, which may be "
                             "looked at any time")
    return mixture_plan(alpha=args.alpha, sides=args.sides, metric=_metric(args),
                        max_n_per_arm=args.max_n_per_arm, tau2=args.tau2)


def mixture_summary(plan: Any) -> str:
    """A mixture plan in a few plain lines (the same function as :func:`plan_summary`)."""
    return plan_summary(plan)


def cmd_plan(args: argparse.Namespace) -> int:
    if args.kind == "group-sequential":
        warnings.warn("--kind group-sequential is now --kind group_sequential; the old "
                      "spelling is accepted for this release only", DeprecationWarning,
                      stacklevel=2)
        args.kind = "group_sequential"
    from seqtest.cli import experiment
    if experiment.wants_experiment(args):
        return experiment.cmd_plan(args, _metric(args), _fractions(args.information_fractions))
    if args.kind == "mixture":
        plan = make_mixture_plan(args)
        if args.json:
            write(json.dumps(plan.to_dict(), indent=2, allow_nan=False), args.json)
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
        write(json.dumps(plan.to_dict(), indent=2, allow_nan=False), args.json)
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
        write(buf.getvalue(), args.csv)
    if args.json != "-" and args.csv != "-":
        headers, rows = plan_rows(plan)
        print(plan_summary(plan))
        print()
        print(table(headers, rows))
        print()
        print(f"Note: {CAUTION}")
    return 0
