"""Every module the package imports at run time (at the top of a file or inside a function)
is the standard library, livecurve itself, or a distribution listed in ``[project]
dependencies`` — so a plain ``pip install .`` runs every verb (``spread`` included).

References: PEP 621 (``[project] dependencies``); ``sys.stdlib_module_names`` (Python 3.10+)
for the standard library; ``importlib.metadata.packages_distributions`` maps an import name
to the distribution that provides it; PEP 503 name normalisation (``-``/``_``/``.`` alike,
case-blind).
"""

from __future__ import annotations

import ast
import importlib.metadata as md
import re
import sys
import tomllib

from tests.conftest import ROOT


def _normal(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def _imported_modules() -> dict[str, str]:
    """Top-level module name -> first file importing it, over every file of the package."""
    found = {}
    for path in sorted((ROOT / "livecurve").rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            else:
                continue
            for n in names:
                found.setdefault(n.split(".")[0], str(path.relative_to(ROOT)))
    return found


def test_every_runtime_import_is_a_declared_dependency():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    declared = {_normal(re.split(r"[<>=!~ ;\[]", d, maxsplit=1)[0])
                for d in project["dependencies"]}
    dist_of = md.packages_distributions()
    missing = []
    for mod, where in _imported_modules().items():
        if mod in sys.stdlib_module_names or mod in ("livecurve", "__future__"):
            continue
        dists = {_normal(d) for d in dist_of.get(mod, [])}
        assert dists, f"{mod} (imported by {where}) is not installed here"
        if not dists & declared:
            missing.append(f"{mod} ({where}) from {', '.join(sorted(dists))}")
    assert not missing, "run-time imports missing from [project] dependencies: " + \
        "; ".join(missing)


def test_colour_science_is_a_runtime_dependency():
    # spread's colour differences (CIEDE2000) come from colour-science
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    assert any(_normal(d).startswith("colour-science") for d in project["dependencies"])
