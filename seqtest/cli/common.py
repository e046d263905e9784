"""What the subcommands share: errors, number formatting, tables, writing, plan files.

Kept free of numpy and the rest of seqtest at import time, so that ``seqtest --help``
starts fast; the subcommands import what they use when they run.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import Any

__all__ = ["UsageError", "fmt", "read_plan", "table", "write"]


class UsageError(Exception):
    """Bad input spotted by the command line itself."""


def fmt(x: Any, digits: int = 4) -> str:
    """A number for a table: integers as integers, small and large ones in e-notation."""
    if x is None:
        return "-"
    if isinstance(x, str):
        return x
    if isinstance(x, int) and not isinstance(x, bool):
        return str(x)
    v = float(x)
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if math.isnan(v):
        return "-"
    if v.is_integer() and abs(v) >= 100:
        return f"{int(v)}"
    if v != 0 and (abs(v) < 1e-3 or abs(v) >= 1e6):
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}f}"


def table(headers: list[str], rows: list[list[Any]]) -> str:
    """A plain-text table, right-aligned, with a rule under the headers."""
    cells = [headers] + [[fmt(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def write(text: str, target: str) -> None:
    """Write ``text`` to a file, or to stdout for ``-``."""
    text = text if text.endswith("\n") else text + "\n"
    if target == "-":
        sys.stdout.write(text)
    else:
        Path(target).write_text(text)


def read_plan_document(path: str, option: str = "--plan") -> dict[str, Any]:
    """The JSON object of a plan document file, or a :class:`UsageError` naming the
    option and what is wrong with the file."""
    p = Path(path)
    if not p.is_file():
        raise UsageError(f"{option}: {str(p)!r} does not exist; write one with "
                         "'seqtest plan --json FILE'")
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise UsageError(f"{option}: cannot read {str(p)!r} ({exc})") from None
    except json.JSONDecodeError as exc:
        raise UsageError(f"{option}: {str(p)!r} is not valid JSON ({exc.msg} at line "
                         f"{exc.lineno})") from None
    if not isinstance(doc, dict):
        raise UsageError(f"{option}: {str(p)!r} holds {type(doc).__name__}; allowed is a "
                         "plan document (a JSON object)")
    return doc


def read_plan(path: str, option: str = "--plan", *, trust: bool = False) -> Any:
    """Read and verify a plan document (see :func:`seqtest.plan_from_dict`)."""
    from seqtest.planning.documents import plan_from_dict

    doc = read_plan_document(path, option)
    try:
        return plan_from_dict(doc, trust=trust)
    except ValueError as exc:
        raise UsageError(f"{option}: {exc}") from None
