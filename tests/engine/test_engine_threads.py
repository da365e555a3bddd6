"""numba's OpenMP threads sleep between kernels unless the user says otherwise.

livecurve/__init__.py sets ``OMP_WAIT_POLICY=PASSIVE`` when it is not set (the cores are
shared with ffmpeg's decoder and encoder; benchmarks/README.md, "Real time at HD", has the
measurement).  Checked in a child process: the setting must be in place before numba
starts its OpenMP pool, and a user's own setting must win.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from tests.conftest import ROOT

CODE = ("import os, livecurve, numba, numpy as np\n"
        "@numba.njit(parallel=True)\n"
        "def f(a):\n"
        "    s = 0.0\n"
        "    for i in numba.prange(a.size):\n"
        "        s += a[i]\n"
        "    return s\n"
        "f(np.ones(64))\n"
        "print(os.environ.get('OMP_WAIT_POLICY'), numba.threading_layer())\n")


@pytest.mark.parametrize("given, want", [(None, "PASSIVE"), ("ACTIVE", "ACTIVE")])
def test_openmp_threads_sleep_unless_told_otherwise(given, want):
    env = {k: v for k, v in os.environ.items() if k != "OMP_WAIT_POLICY"}
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"]
                                     if env.get("PYTHONPATH") else "")
    if given is not None:
        env["OMP_WAIT_POLICY"] = given
    out = subprocess.run([sys.executable, "-c", CODE], capture_output=True, text=True,
                         env=env, timeout=300, check=True).stdout.split()
    assert out[0] == want
