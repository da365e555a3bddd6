"""Every verb from a plain ``pip install .`` (no extras) in a fresh virtual environment.

The rest of the suite runs with the test extras installed, so a run-time import that is
only in the extras (OpenColorIO, hypothesis…) would pass it and then fail for a user
(this test found ``spread`` importing colour-science, then only a test extra).

Here the checkout is installed as a user would install it — a normal,
non-editable ``pip install`` of the project folder, dependencies resolved by pip (its
wheel cache may be reused) — and each verb runs once on tiny inputs from outside the
checkout, with no ``PYTHONPATH``, so only the installed package can be imported.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import venv

import cv2
import numpy as np
import pytest

from tests.conftest import ROOT, require

pytestmark = pytest.mark.slow


def _env():
    e = {k: v for k, v in os.environ.items()
         if k not in ("PYTHONPATH", "PYTHONHOME", "VIRTUAL_ENV", "PYTHONSTARTUP")}
    e["PYTHONNOUSERSITE"] = "1"
    return e


@pytest.fixture(scope="module")
def plain_env(tmp_path_factory):
    """(python of a fresh venv with the checkout installed, a scratch folder)."""
    base = tmp_path_factory.mktemp("plain")
    src = base / "src"
    # a clean copy of the checkout (no build leftovers, caches or test outputs)
    shutil.copytree(ROOT, src, ignore=shutil.ignore_patterns(
        ".git", "__pycache__", "*.egg-info", "build", ".hypothesis", ".pytest_cache"))
    env_dir = base / "venv"
    venv.EnvBuilder(with_pip=True, clear=True).create(env_dir)
    py = env_dir / "bin" / "python"
    proc = subprocess.run([str(py), "-m", "pip", "install", "--disable-pip-version-check",
                           "-q", str(src)], capture_output=True, text=True, timeout=900,
                          env=_env(), cwd=base)
    offline = any(w in proc.stderr for w in ("Could not find a version", "No matching "
                                             "distribution", "Failed to establish"))
    require(not offline, "the package index (or pip's wheel cache) for a plain install")
    assert proc.returncode == 0, proc.stderr[-3000:]
    work = base / "work"
    work.mkdir()
    return py, work


def _run(py, work, *args, timeout=600):
    proc = subprocess.run([str(py), "-m", "livecurve.cli", *map(str, args)],
                          capture_output=True, text=True, cwd=work, timeout=timeout,
                          env=_env())
    assert "Traceback" not in proc.stderr, proc.stderr[-3000:]
    assert proc.returncode == 0, (args, proc.stdout[-1500:], proc.stderr[-1500:])
    return proc


def test_only_the_installed_package_is_imported(plain_env):
    py, work = plain_env
    out = subprocess.run([str(py), "-c", "import livecurve, sys; print(livecurve.__file__);"
                          "import importlib.util as u;"
                          "print([m for m in ('PyOpenColorIO', 'hypothesis', 'pytest') "
                          "if u.find_spec(m)])"],
                         capture_output=True, text=True, cwd=work, env=_env(), check=True)
    where, extras = out.stdout.splitlines()
    assert where.startswith(str(py.parent.parent)), where  # inside the venv, not the checkout
    assert extras == "[]", extras  # the test extras are really absent


def test_every_verb_runs_from_a_plain_install(plain_env):
    py, work = plain_env
    chain = work / "knee.toml"
    shutil.copy(ROOT / "configs" / "night_knee.toml", chain)
    text = chain.read_text()
    assert "[control" in text  # the chain's audio control needs a clip: drop it for stills
    chain.write_text(text[:text.index("[control")])
    still = work / "grey.png"
    ramp = np.tile(np.linspace(0, 255, 64).astype(np.uint8), (36, 1))
    cv2.imwrite(str(still), np.dstack([ramp] * 3))

    _run(py, work, "check", chain)
    _run(py, work, "curve", chain, "--csv", work / "c.csv", "--points", 11)
    assert (work / "c.csv").read_text().startswith("input_v,")
    _run(py, work, "export", chain, "--spice", work / "d.cir", "--clf", work / "l.clf")
    assert (work / "d.cir").stat().st_size > 0 and (work / "l.clf").stat().st_size > 0
    _run(py, work, "render", "--chain", chain, still, work / "out.png", "--quiet")
    assert cv2.imread(str(work / "out.png")).shape == (36, 64, 3)
    _run(py, work, "drift", chain, "--steps", 2, "--out", work / "drift")
    _run(py, work, "spread", chain, "--trials", 3, "--out", work / "spread", "--quiet")
    _run(py, work, "devices")
    _run(py, work, "preview", "--chain", chain, still, "--snapshot", work / "snap.png")
    assert (work / "snap.png").stat().st_size > 0
    assert sys.executable != str(py)


def test_demo_runs_from_a_plain_install(plain_env):
    # the wheel carries the demo's chain files and clip (setup.py); this once failed
    py, work = plain_env
    _run(py, work, "demo", "--quick", "--out", work / "demo")
    from livecurve.outputs.demo import demo_files
    for name in demo_files(quick=True):
        assert (work / "demo" / name).stat().st_size > 0, name
