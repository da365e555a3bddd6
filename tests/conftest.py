"""Shared test helpers.

``require(name)`` makes a test that needs an outside tool (ngspice, Xvfb,
xdotool, ffmpeg, ALSA, OpenColorIO) skip on a developer's laptop where the
tool is missing, but *fail* in CI (``CI`` set in the environment), so a
reference check can never disappear silently.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

#: The checkout under test; CLI subprocesses import livecurve from here.
ROOT = Path(__file__).resolve().parents[1]

IN_CI = os.environ.get("CI", "").lower() not in ("", "0", "false", "no")


def require(ok: bool, what: str) -> None:
    """Skip (laptop) or fail (CI) when an outside tool is missing."""
    if ok:
        return
    if IN_CI:
        pytest.fail(f"{what} is required in CI but missing", pytrace=False)
    pytest.skip(f"{what} not available")


def require_exe(name: str) -> str:
    """Return the path of executable *name*, or skip/fail as :func:`require` does."""
    path = shutil.which(name)
    require(path is not None, f"executable '{name}'")
    return path


def run_cli(*args, cwd=None, timeout: float = 600, env: dict | None = None, **kw):
    """Run ``python -m livecurve.cli ARGS`` in a subprocess of this checkout.

    Returns the CompletedProcess (text mode, stdout/stderr captured).  ``PYTHONPATH`` points
    at the checkout so the code under test is the code that runs, whatever is installed.
    """
    e = dict(os.environ if env is None else env)
    e["PYTHONPATH"] = str(ROOT) + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    return subprocess.run([sys.executable, "-m", "livecurve.cli", *map(str, args)],
                          capture_output=True, text=True, cwd=cwd or ROOT, timeout=timeout,
                          env=e, **kw)


@pytest.fixture
def ngspice() -> str:
    """Path to the ngspice executable (Debian package ``ngspice``)."""
    return require_exe("ngspice")
