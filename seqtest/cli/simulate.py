"""The ``seqtest simulate`` subcommand: check a plan's error rates by simulation.

``seqtest simulate --plan PLAN.json --scenario FILE --reps N [--json [FILE]]``
simulates N experiments of the scenario (see ``simulations/README.md``) under the
plan (an experiment plan takes an experiment scenario: many arms, several metrics;
:mod:`seqtest.simulation.experiment`) and prints the type I error (or power) with
its Clopper-Pearson interval, the naive baseline, the expected sample size and the
stopping looks. The chunks run in this process, on ``--workers`` local processes, or
with ``--scheduler ADDRESS`` as tasks on a Dask cluster (``--scheduler local`` starts
one of ``--workers`` processes; needs the ``dask`` extra); the result is the same bit
for bit. A progress bar goes to stderr on long runs. Bad input gives a one-line message
and exit status 2; with ``--check`` a plan that leaks alpha gives exit status 1.

:func:`register` adds the subcommand to the ``seqtest`` parser.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import sys
from pathlib import Path
from typing import Any

from seqtest.cli.common import read_plan
from seqtest.simulation import DEFAULT_CHUNK

__all__ = ["handler", "register"]


def _whole(name: str, lo: int):
    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"got {text!r}; allowed is a whole number "
                                             f">= {lo}") from None
        if v < lo:
            raise argparse.ArgumentTypeError(f"got {v}; allowed is a whole number >= {lo}")
        return v
    parse.__name__ = name
    return parse


def register(subparsers: Any) -> argparse.ArgumentParser:
    """Add the ``simulate`` subcommand; sets ``func=handler``."""

    p = subparsers.add_parser(
        "simulate", help="check a plan's error rates on simulated experiments",
        description="Simulate experiments of a scenario under a plan, through the same "
                    "decision code as 'seqtest analyze', and report the type I error "
                    "(or power) with its Monte Carlo interval.")
    p.add_argument("--plan", required=True, help="plan document from 'seqtest plan --json'")
    p.add_argument("--scenario", required=True,
                   help="scenario file (.toml or .json; see simulations/README.md)")
    p.add_argument("--reps", type=_whole("reps", 1), default=100_000,
                   help="number of simulated experiments (100000)")
    p.add_argument("--seed", type=_whole("seed", 0), default=0,
                   help="seed of the run; the same seed gives the same result (0)")
    p.add_argument("--workers", type=_whole("workers", 0), default=1,
                   help="processes to use, 0 for all cores (1); results do not depend on it")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run the chunks on the Dask cluster whose scheduler is at ADDRESS "
                        "(tcp://host:8786), or 'local' to start a local cluster of "
                        "--workers processes; results do not depend on it (needs the "
                        "dask extra)")
    p.add_argument("--confidence", type=float, default=0.95,
                   help="level of the Clopper-Pearson intervals (0.95)")
    p.add_argument("--chunk-size", type=_whole("chunk-size", 1), default=DEFAULT_CHUNK,
                   dest="chunk_size",
                   help=f"replicates per chunk, part of the seed's meaning ({DEFAULT_CHUNK})")
    p.add_argument("--json", nargs="?", const="-", default=None, metavar="FILE",
                   help="write the result as JSON to FILE, or to stdout without FILE")
    p.add_argument("--plot", metavar="FILE.png", default=None,
                   help="draw the rejection rate and the stopping looks")
    p.add_argument("--check", action="store_true",
                   help="exit with status 1 when the type I error leaks above alpha")
    p.add_argument("--no-progress", action="store_true", dest="no_progress",
                   help="no progress bar")
    p.set_defaults(func=handler)
    return p


def handler(args: argparse.Namespace) -> int:
    """Run ``seqtest simulate``; raise ValueError with a one-line message on bad input."""
    from seqtest.simulation.engine import plot_result, simulate
    from seqtest.simulation.scenarios import load_scenario

    if not 0 < args.confidence < 1:
        raise ValueError(f"--confidence: got {args.confidence!r}; allowed is a level in "
                         "(0, 1)")
    plan = read_plan(args.plan)
    experiment = getattr(plan, "kind", None) == "experiment"
    scenario = None
    if not experiment:
        try:
            scenario = load_scenario(args.scenario)
        except ValueError as exc:
            raise ValueError(f"--scenario: {exc}") from None
    if args.plot is not None and not Path(args.plot).parent.is_dir():
        raise ValueError(f"--plot: the folder of {args.plot!r} does not exist")

    bar = None
    progress = None
    if not args.no_progress:
        from tqdm import tqdm
        bar = tqdm(total=args.reps, unit="exp", unit_scale=True, file=sys.stderr,
                   delay=1.0, desc="simulating", leave=False)

        def progress(done: int, total: int) -> None:
            bar.update(done - bar.n)
    try:
        with contextlib.ExitStack() as stack:
            client = None
            if args.scheduler is not None:
                from seqtest.simulation.runner import dask_client
                try:
                    client = stack.enter_context(dask_client(
                        args.scheduler, workers=args.workers or None))
                except ValueError as exc:
                    raise ValueError(f"--{exc}") from None
            if experiment:
                from seqtest.cli.experiment import cmd_simulate
                result = cmd_simulate(args, plan, progress, client)
            else:
                assert scenario is not None
                result = simulate(plan, scenario, args.reps, seed=args.seed,
                                  workers=args.workers, chunk_size=args.chunk_size,
                                  confidence=args.confidence, progress=progress,
                                  client=client)
    finally:
        if bar is not None:
            bar.close()
    if args.plot is not None and not experiment:
        plot_result(result, args.plot)
    if args.json is not None:
        text = json.dumps(result.to_dict(), indent=2, allow_nan=False) + "\n"
        if args.json == "-":
            sys.stdout.write(text)
        else:
            Path(args.json).write_text(text)
    if args.json != "-":
        sys.stdout.write(result.table() + "\n")
    if args.check and result.leaks:
        return 1
    return 0
