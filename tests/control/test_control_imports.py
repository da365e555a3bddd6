"""The control package's modules import each other without a circle (issue: live ↔ sources
↔ spec).  Every import counts, including ones inside functions: a lazy import only hides a
circle until the day someone moves it to the top of the file."""

from __future__ import annotations

import ast
from pathlib import Path

import livecurve.control as control_pkg

PKG = Path(control_pkg.__file__).parent


def _edges() -> dict[str, set[str]]:
    mods = {p.stem for p in PKG.glob("*.py") if p.stem != "__init__"}
    graph: dict[str, set[str]] = {m: set() for m in mods}
    for m in mods:
        tree = ast.parse((PKG / f"{m}.py").read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            targets = []
            if isinstance(node, ast.ImportFrom) and node.module:
                if node.module == "livecurve.control":
                    targets = [a.name for a in node.names]
                elif node.module.startswith("livecurve.control."):
                    targets = [node.module.split(".")[2]]
            elif isinstance(node, ast.Import):
                targets = [a.name.split(".")[2] for a in node.names
                           if a.name.startswith("livecurve.control.")]
            graph[m] |= {t for t in targets if t in mods and t != m}
    return graph


def _cycle(graph):
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n):
        state[n] = 1
        stack.append(n)
        for k in sorted(graph[n]):
            if state.get(k) == 1:
                return stack[stack.index(k):] + [k]
            if k not in state:
                found = visit(k)
                if found:
                    return found
        state[n] = 2
        stack.pop()
        return None

    for n in sorted(graph):
        if n not in state:
            found = visit(n)
            if found:
                return found
    return None


def test_control_modules_import_without_a_circle():
    graph = _edges()
    assert {"live", "sources", "spec"} <= set(graph)
    assert _cycle(graph) is None, " → ".join(_cycle(graph))


def test_cycle_finder_finds_a_circle():
    # the checker itself: a made-up graph with a circle is reported
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


def test_parse_source_still_reachable():
    from livecurve.control import parse_source
    from livecurve.control.spec import parse_source as ps
    assert parse_source is ps
