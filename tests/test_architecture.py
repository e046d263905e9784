"""The shape of the code: imports point downward, no cycles, the library stands alone.

Layers, lowest first (DEVELOPERS.md, "Map"): ``seqtest.core`` < ``seqtest.reporting`` <
``seqtest.planning`` <
``seqtest.monitoring`` < ``seqtest.simulation`` and ``seqtest.plotting`` <
``seqtest.cli`` and ``seqtest.client`` < the public surface (``seqtest``, ``seqtest.spending``,
``seqtest.mixture``) < ``service``. A module may import its own layer and the layers
below, never above; the graph of imports between modules (at any depth in a module,
except imports made only for type checkers) has no cycle; the library never imports
the service, and runs without the web stack installed.
"""

from __future__ import annotations

import ast
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("seqtest", "service")

LAYERS = [
    ("seqtest.core", 0),
    ("seqtest.reporting", 0.5),  # reads results by field name; planning and monitoring
                                 # delegate their displays to it
    ("seqtest.planning", 1),
    ("seqtest.monitoring", 2),
    ("seqtest.simulation", 3),
    ("seqtest.plotting", 3),
    ("seqtest.cli", 4),
    ("seqtest.client", 4),         # a door like the command line (httpx, imported lazily)
    ("seqtest.__main__", 4),
    ("seqtest.spending", 5),
    ("seqtest.mixture", 5),
    ("seqtest", 5),
    ("service", 6),
]


def layer(module: str) -> int:
    for prefix, level in LAYERS:
        if module == prefix or module.startswith(prefix + "."):
            return level
    raise AssertionError(f"{module} belongs to no layer; add it to LAYERS")


def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _type_checking_only(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING")


def imports_of(path: Path, modules: set[str]) -> set[str]:
    """Project modules imported by the file (resolved to existing modules)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found: set[str] = set()

    def resolve(name: str) -> str | None:
        while name and name not in modules:
            name = name.rpartition(".")[0]
        return name or None

    def visit(node: ast.AST) -> None:
        if isinstance(node, ast.If) and _type_checking_only(node):
            for child in node.orelse:
                visit(child)
            return
        if isinstance(node, ast.Import):
            for alias in node.names:
                hit = resolve(alias.name)
                if hit:
                    found.add(hit)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            for alias in node.names:
                hit = resolve(f"{node.module}.{alias.name}") or resolve(node.module)
                if hit:
                    found.add(hit)
        for child in ast.iter_child_nodes(node):
            visit(child)

    visit(tree)
    found.discard(module_name(path))
    return found


def graph() -> dict[str, set[str]]:
    files = [p for pkg in PACKAGES for p in (ROOT / pkg).rglob("*.py")]
    modules = {module_name(p) for p in files}
    return {module_name(p): imports_of(p, modules) for p in files}


def test_every_module_has_a_layer():
    for module in graph():
        layer(module)


def test_imports_point_downward():
    # common practice: a layered package imports only its own layer and those below
    wrong = [f"{m} (layer {layer(m)}) imports {d} (layer {layer(d)})"
             for m, deps in graph().items() for d in deps if layer(d) > layer(m)]
    assert not wrong, "\n".join(sorted(wrong))


def find_cycles(g: dict[str, set[str]]) -> list[list[str]]:
    """Cycles of a directed graph, by depth-first search (each reported once at least)."""
    state: dict[str, int] = {}
    stack: list[str] = []
    cycles: list[list[str]] = []

    def walk(m: str) -> None:
        state[m] = 1
        stack.append(m)
        for d in sorted(g.get(m, ())):
            if state.get(d) == 1:
                cycles.append(stack[stack.index(d):] + [d])
            elif d not in state:
                walk(d)
        stack.pop()
        state[m] = 2

    for m in sorted(g):
        if m not in state:
            walk(m)
    return cycles


def test_no_import_cycles():
    cycles = find_cycles(graph())
    assert not cycles, "\n".join(" -> ".join(c) for c in cycles)


def test_the_library_never_imports_the_service():
    bad = [m for m, deps in graph().items()
           if m.startswith("seqtest") and any(d.startswith("service") for d in deps)]
    assert not bad, bad


def test_the_checks_can_fail(tmp_path):
    # the checks above must be able to fail: a cycle through an import inside a function
    assert find_cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == [["a", "b", "c", "a"]]
    assert find_cycles({"a": {"b"}, "b": set()}) == []
    pkg = tmp_path / "seqtest" / "core"
    pkg.mkdir(parents=True)
    (pkg / "a.py").write_text("from seqtest.core import b\n")
    (pkg / "b.py").write_text("def f():\n    from seqtest.core import a\n")
    (pkg / "c.py").write_text("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                              "    from seqtest.core import a\n")
    modules = {"seqtest.core.a", "seqtest.core.b", "seqtest.core.c"}
    global ROOT
    saved = ROOT
    try:
        ROOT = tmp_path
        assert imports_of(pkg / "a.py", modules) == {"seqtest.core.b"}
        assert imports_of(pkg / "b.py", modules) == {"seqtest.core.a"}
        assert imports_of(pkg / "c.py", modules) == set()
    finally:
        ROOT = saved
    assert layer("seqtest.cli.plan") > layer("seqtest.monitoring.rules")


BLOCK_WEB_STACK = textwrap.dedent("""
    import importlib.abc, sys
    BLOCKED = {"fastapi", "starlette", "uvicorn", "sqlalchemy", "psycopg", "pydantic",
               "httpx", "service"}
    class Block(importlib.abc.MetaPathFinder):
        def find_spec(self, name, path=None, target=None):
            if name.partition(".")[0] in BLOCKED:
                raise ModuleNotFoundError(f"No module named {name!r}", name=name)
            return None
    sys.meta_path.insert(0, Block())
""")


@pytest.mark.parametrize("argv", [["plan", "--looks", "3"], ["--help"], ["serve"],
                                  ["post", "--experiment", "exp_1",
                                   "--total", "control.n=10", "--total", "treatment.n=10"]])
def test_library_runs_without_the_web_stack(tmp_path, argv):
    # the service is an extra: without it the library and its command line still work,
    # and a service subcommand says what to install
    code = BLOCK_WEB_STACK + textwrap.dedent(f"""
        import seqtest, pkgutil, importlib
        for info in pkgutil.walk_packages(seqtest.__path__, "seqtest."):
            if info.name != "seqtest.__main__":
                importlib.import_module(info.name)
        plan = seqtest.design(looks=3)
        seqtest.analyze(plan, [{{"control": {{"n": 100, "successes": 10}},
                                "treatment": {{"n": 100, "successes": 12}}}}], max_n=600,
                        metric="binary")
        from seqtest.cli import main
        try:
            status = main({argv!r})
        except SystemExit as exc:
            status = exc.code
        assert not [m for m in sys.modules if m.partition(".")[0] in BLOCKED]
        print("status", status)
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    if argv == ["serve"]:
        assert "status 2" in proc.stdout
        assert "not installed" in proc.stderr and "seqtest[service]" in proc.stderr
    elif argv[0] == "post":
        # the client is a door of the library; without httpx it says what to install
        assert "status 2" in proc.stdout
        assert "not installed" in proc.stderr and "seqtest[client]" in proc.stderr
    else:
        assert "status 0" in proc.stdout
