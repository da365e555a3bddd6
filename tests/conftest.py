"""Shared test helpers.

``require(name)`` makes a test that needs an outside tool (ngspice, Xvfb,
xdotool, ffmpeg, ALSA, OpenColorIO) skip on a developer's laptop where the
tool is missing, but *fail* in CI (``CI`` set in the environment), so a
reference check can never disappear silently.
"""

from __future__ import annotations

import os
import shutil

import pytest

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


@pytest.fixture
def ngspice() -> str:
    """Path to the ngspice executable (Debian package ``ngspice``)."""
    return require_exe("ngspice")
