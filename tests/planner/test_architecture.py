"""The house rules of the code, read from the source with ``ast`` (every import, also inside functions).

* ``kncast.forecast`` (the physics library) never imports ``kncast.planner``;
* nothing outside the command layer (``planner/commands/`` and the entry point ``planner/cli.py``)
  imports from ``kncast.planner.commands``;
* no import cycles between modules;
* option names (``--something``) appear in string values only in the command layer: lower layers
  name parameters, and the command line maps them to its options.
"""
from __future__ import annotations

import ast
import re
from pathlib import Path

from conftest import ROOT

PACKAGES = {"planner": "kncast.planner", "forecast": "kncast.forecast"}
COMMAND_LAYER = ("kncast.planner.commands", "kncast.planner.cli")
OPTION = re.compile(r"(?<![\w-])--[a-z][a-z0-9]+(?:-[a-z0-9]+)*")


def _modules() -> dict[str, Path]:
    out = {}
    for folder, dotted in PACKAGES.items():
        for path in sorted((ROOT / folder).rglob("*.py")):
            rel = path.relative_to(ROOT / folder).with_suffix("")
            parts = [p for p in rel.parts if p != "__init__"]
            out[".".join([dotted, *parts])] = path
    return out


MODULES = _modules()


def _is_package(name: str) -> bool:
    return MODULES[name].name == "__init__.py"


def _imports(name: str) -> set[str]:
    """The kncast modules ``name`` imports (``from pkg import sub`` counts as importing ``pkg.sub``)."""
    tree = ast.parse(MODULES[name].read_text(), filename=str(MODULES[name]))
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                pkg = name if _is_package(name) else name.rpartition(".")[0]
                for _ in range(node.level - 1):
                    pkg = pkg.rpartition(".")[0]
                base = f"{pkg}.{base}" if base else pkg
            found.add(base)
            found |= {f"{base}.{a.name}" for a in node.names}
    return {m for m in found if m in MODULES and m != name}


GRAPH = {name: _imports(name) for name in MODULES}


def _in_command_layer(name: str) -> bool:
    return any(name == c or name.startswith(c + ".") for c in COMMAND_LAYER)


def test_forecast_never_imports_planner():
    bad = {m: sorted(i for i in deps if i.startswith("kncast.planner"))
           for m, deps in GRAPH.items() if m.startswith("kncast.forecast")}
    assert not {m: d for m, d in bad.items() if d}


def test_nothing_outside_the_command_layer_imports_commands():
    bad = {m: sorted(i for i in deps if i.startswith("kncast.planner.commands"))
           for m, deps in GRAPH.items() if not _in_command_layer(m)}
    assert not {m: d for m, d in bad.items() if d}


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in graph[v]:
            # a package's __init__ importing its own sub-modules is how packages work, not a cycle
            if _is_package(v) and w.startswith(v + "."):
                continue
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in graph:
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles():
    assert _cycles(GRAPH) == []


def test_cycle_finder_finds_a_cycle():
    # hand-built check of the finder itself: a -> b -> c -> a is one cycle, d stands alone
    graph = {"x.a": {"x.b"}, "x.b": {"x.c"}, "x.c": {"x.a"}, "x.d": {"x.a"}}
    saved = dict(MODULES)
    try:
        MODULES.update({k: ROOT / "pyproject.toml" for k in graph})
        assert _cycles(graph) == [["x.a", "x.b", "x.c"]]
    finally:
        MODULES.clear()
        MODULES.update(saved)


def _string_values(tree: ast.AST):
    """String constants that are not docstrings."""
    docstrings = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            body = getattr(node, "body", [])
            if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
                docstrings.add(id(body[0].value))
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings:
            yield node


def test_option_pattern_finds_options():
    assert OPTION.findall("use --sites-dir DIR or --snr; ls='--'") == ["--sites-dir", "--snr"]


def test_option_names_only_in_the_command_layer():
    found = []
    for name, path in MODULES.items():
        if _in_command_layer(name):
            continue
        tree = ast.parse(path.read_text())
        for node in _string_values(tree):
            for m in OPTION.findall(node.value):
                found.append(f"{path.relative_to(ROOT)}:{node.lineno}: {m}")
    # the report's style sheet uses CSS custom properties (--ink, --rule ...), which are not options
    found = [f for f in found if "plan/report.py" not in f or not re.search(r": --(ink|muted|rule|band|accent)$", f)]
    assert found == []
