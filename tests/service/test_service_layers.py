"""The service's modules import only downward: a newcomer finds a rule from the folder
list, and no layer calls back into one above it (common practice: layered design).

Layers, lowest first: errors, config, logs -> db -> library -> views -> usecases ->
web (the pages) -> api -> server -> cli -> the entry points kept for the seqtest
command (commands, demo, __main__). Inside a layer, modules may import each other only
without a cycle.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2] / "service"

LAYERS = [
    {"service.errors", "service.config", "service.logs"},
    {"service.db"},
    {"service.library"},
    {"service.views"},
    {"service.usecases"},
    {"service.web"},
    {"service.api"},
    {"service.server"},
    {"service.cli"},
    {"service.demo", "service.__main__"},
]


def _module(path: Path) -> str:
    rel = path.relative_to(ROOT.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _layer(module: str) -> int:
    for i, group in enumerate(LAYERS):
        if any(module == g or module.startswith(g + ".") for g in group):
            return i
    raise AssertionError(f"{module} is in no layer; add it to LAYERS")


def _imports() -> dict[str, set[str]]:
    """service module -> the service modules it imports (at any depth in the file)."""
    graph: dict[str, set[str]] = {}
    for path in ROOT.rglob("*.py"):
        mod = _module(path)
        found: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Import):
                found |= {a.name for a in node.names if a.name.startswith("service")}
            elif isinstance(node, ast.ImportFrom) and node.module and \
                    node.module.startswith("service"):
                found.add(node.module)
                found |= {f"{node.module}.{a.name}" for a in node.names}
        known = {_module(p) for p in ROOT.rglob("*.py")}
        graph[mod] = {m for m in found if m in known and m != mod}
    return graph


GRAPH = _imports()


@pytest.mark.parametrize("module", sorted(m for m in GRAPH if m != "service"))
def test_imports_point_downward(module: str):
    mine = _layer(module)
    for target in GRAPH[module]:
        if module.startswith(target + ".") or target == "service":
            continue  # a package's own __init__
        assert _layer(target) <= mine, f"{module} (layer {mine}) imports {target} " \
                                       f"(layer {_layer(target)})"


def test_no_import_cycles():
    state: dict[str, int] = {}

    def visit(m: str, path: list[str]) -> None:
        state[m] = 1
        for t in GRAPH.get(m, ()):
            if m.startswith(t + "."):
                continue
            if state.get(t) == 1:
                raise AssertionError("import cycle: " + " -> ".join([*path, m, t]))
            if state.get(t) is None:
                visit(t, [*path, m])
        state[m] = 2

    for m in sorted(GRAPH):
        if m not in state:
            visit(m, [])


def test_only_the_adapter_imports_the_library():
    for path in ROOT.rglob("*.py"):
        mod = _module(path)
        if mod == "service.library":
            continue
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else \
                [node.module or ""] if isinstance(node, ast.ImportFrom) else []
            assert not any(n == "seqtest" or n.startswith("seqtest.") for n in names), \
                f"{mod} imports the library directly; go through service.library"
