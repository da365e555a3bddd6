"""The code base passes ruff with the project's settings (pyproject.toml [tool.ruff])."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from tests.conftest import require

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_clean():
    try:
        import ruff  # noqa: F401  (the PyPI package ships the executable)
    except ImportError:
        require(False, "ruff (pip package, in the test extras)")
    run = subprocess.run([sys.executable, "-m", "ruff", "check", "livecurve", "tests",
                          "benchmarks", "clips"], cwd=ROOT, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout[-4000:] + run.stderr[-2000:]
