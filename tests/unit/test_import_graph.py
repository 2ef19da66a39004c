"""The parts of the package import one another one way only: no cycle between the subpackages of agent/
(settings/, analysis/, alarms/, ...) and its top-level modules (kinematics.py, pipeline.py, ...).

The graph is read from the source with ``ast``, imports inside functions included (a deferred import
hides a cycle from the interpreter, not from a reader). The simulator folder (installed as
``rotorwatch.simulators``) counts as one more part. ``settings`` sits at the bottom: it depends on
nothing in the package but ``errors``.
"""

from __future__ import annotations

import ast
import pathlib
from collections import defaultdict

REPO = pathlib.Path(__file__).resolve().parents[2]
FOLDERS = {"rotorwatch": REPO / "agent", "rotorwatch.simulators": REPO / "simulators"}


def _is_module(dotted: str) -> bool:
    """True when ``rotorwatch.a.b`` names a module or package on disk."""
    parts = dotted.split(".")
    if parts[:2] == ["rotorwatch", "simulators"]:
        base, rest = FOLDERS["rotorwatch.simulators"], parts[2:]
    else:
        base, rest = FOLDERS["rotorwatch"], parts[1:]
    path = base.joinpath(*rest) if rest else base
    return path.with_suffix(".py").is_file() or (path / "__init__.py").is_file()


def _part(dotted: str) -> str | None:
    """The part of the package a module belongs to: ``rotorwatch.analysis.plan`` -> ``analysis``."""
    parts = dotted.split(".")
    if parts[0] != "rotorwatch" or len(parts) < 2:
        return None
    return parts[1]


def _imported(node: ast.AST, module: list[str], is_package: bool) -> list[str]:
    """Dotted names of the modules an import statement reaches."""
    if isinstance(node, ast.Import):
        return [a.name for a in node.names]
    if not isinstance(node, ast.ImportFrom):
        return []
    if node.level:
        base = module if is_package else module[:-1]
        base = base[: len(base) - (node.level - 1)]
        prefix = ".".join(base + ([node.module] if node.module else []))
    else:
        prefix = node.module or ""
    # "from . import x" reaches x when x is a module; "from .a import name" reaches a
    return [f"{prefix}.{a.name}" if _is_module(f"{prefix}.{a.name}") else prefix for a in node.names]


def import_edges() -> dict[str, dict[str, list[str]]]:
    """part -> imported part -> ['file:line', ...]"""
    edges: dict[str, dict[str, list[str]]] = defaultdict(lambda: defaultdict(list))
    for package, folder in FOLDERS.items():
        for path in sorted(folder.rglob("*.py")):
            rel = path.relative_to(folder).with_suffix("")
            module = package.split(".") + list(rel.parts)
            is_package = module[-1] == "__init__"
            if is_package:
                module = module[:-1]
            me = _part(".".join(module))
            for target, line in imports_in(path.read_text(encoding="utf-8"), module, is_package):
                other = _part(target)
                if me is not None and other is not None and other != me:
                    edges[me][other].append(f"{path.relative_to(REPO)}:{line}")
    return edges


def imports_in(source: str, module: list[str], is_package: bool) -> list[tuple[str, int]]:
    """(dotted module, line) of every import in ``source``, at any depth (functions, branches)."""
    return [(target, node.lineno) for node in ast.walk(ast.parse(source))
            for target in _imported(node, module, is_package)]


def cycles(edges: dict[str, dict[str, list[str]]]) -> list[list[str]]:
    """Strongly connected components of more than one part (Tarjan), each sorted."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    found = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        for w in edges.get(v, {}):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                found.append(sorted(component))

    for v in list(edges):
        if v not in index:
            visit(v)
    return found


def test_the_walker_sees_a_cycle_when_there_is_one():
    """The check itself can fail: a made-up graph with a loop through three parts gives that loop."""
    graph = {"a": {"b": ["x:1"]}, "b": {"c": ["x:2"]}, "c": {"a": ["x:3"]}, "d": {"a": ["x:4"]}}
    assert cycles(graph) == [["a", "b", "c"]]
    assert cycles({"a": {"b": ["x:1"]}, "b": {}}) == []


def test_the_walker_sees_imports_inside_functions_and_resolves_relative_ones():
    source = (
        "from .. import kinematics\n"
        "from .plan import build_plan\n"
        "def f():\n"
        "    if True:\n"
        "        from ..settings import models\n"
    )
    found = imports_in(source, ["rotorwatch", "analysis", "bands"], is_package=False)
    assert [(t, line) for t, line in found if t != "rotorwatch"] == [
        ("rotorwatch.kinematics", 1), ("rotorwatch.analysis.plan", 2), ("rotorwatch.settings.models", 5)]
    edges = import_edges()
    assert "settings" in edges["kinematics"] and "kinematics" in edges["analysis"]


def test_no_import_cycle_between_parts_of_the_package():
    edges = import_edges()
    report = []
    for component in cycles(edges):
        for a in component:
            for b in component:
                if b in edges[a]:
                    report.append(f"{a} -> {b}: {', '.join(edges[a][b][:3])}")
    assert report == []


def test_settings_depend_on_nothing_but_errors():
    edges = import_edges()
    assert sorted(edges["settings"]) == ["errors"], dict(edges["settings"])
