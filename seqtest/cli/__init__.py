"""The ``seqtest`` command.

Subcommands: ``plan`` (design a stopping plan), ``analyze`` (decide on the looks so
far), ``report`` (a one-page HTML or Markdown record of the looks), ``simulate`` (check
a plan's error rates by simulation), ``post`` (post looks to the HTTP service and print
its decision), ``demo`` (everything on a bundled example), and
those of installed extensions, found through the entry-point group ``seqtest.commands``
(the HTTP service adds ``serve`` and ``keys`` that way; the library never imports it).

Bad input gives a one-line message on stderr and exit status 2, never a traceback.
Start-up is kept light: the parser imports nothing numerical; each subcommand imports
what it needs when it runs.
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

from seqtest.cli import analyze, demo, plan, post, report, simulate
from seqtest.cli.common import UsageError
from seqtest.core.vocabulary import CAUTION

__all__ = ["ENTRY_POINT_GROUP", "build_parser", "main"]

#: Entry-point group of extensions that add subcommands: each entry is a callable
#: ``register(subparsers)``.
ENTRY_POINT_GROUP = "seqtest.commands"


def _extensions() -> list[Any]:
    from importlib.metadata import entry_points
    return sorted(entry_points(group=ENTRY_POINT_GROUP), key=lambda e: e.name)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="seqtest",
        description="Sequential testing for controlled experiments: plan the looks, "
                    "decide at each one, check the error rates by simulation.",
        epilog=CAUTION)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in (plan, analyze, report, simulate, post, demo):
        module.register(sub)
    for ep in _extensions():
        try:
            register = ep.load()
        except ImportError as exc:  # an extension installed without its dependencies
            missing = getattr(exc, "name", None) or str(exc)
            p = sub.add_parser(ep.name, help=f"(not available: {missing} is not installed)")
            p.set_defaults(func=_unavailable(ep.name, missing))
            continue
        register(sub)
    return parser


def _unavailable(name: str, missing: str) -> Any:
    def run(args: argparse.Namespace) -> int:
        raise UsageError(f"the '{name}' command needs {missing}, which is not installed; "
                         "install seqtest with its service extra: "
                         "pip install 'seqtest[service]'")
    return run


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
