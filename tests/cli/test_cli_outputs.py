"""One output policy for every verb that writes: an existing output is refused (exit 3, the
file untouched) unless ``--force``; the source is never the output; multi-file outputs are
all or nothing; stop signals clean up and exit 128 + N; stale partials of a killed run go.

References: README "an existing output is not replaced without --force" and its exit
statuses (0, 2 bad input, 3 output not written); exit status 128 + N for a process ended by
signal N is the POSIX shell convention (common practice; IEEE Std 1003.1, "Shell Command
Language", 2.8.2 Exit Status for Commands); signal numbers SIGHUP 1, SIGINT 2, SIGTERM 15 are
the POSIX/Linux values (signal(7)); ENOSPC "No space left on device" (POSIX errno).
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import cv2
import numpy as np
import pytest

from tests.conftest import ROOT, require, run_cli

KNEE = ROOT / "configs" / "night_knee.toml"
SHOULDER = ROOT / "configs" / "film_shoulder.toml"
SENTINEL = b"keep me: written before the run\n"


def _still(path: Path) -> Path:
    ramp = np.tile(np.linspace(0, 255, 48, dtype=np.uint8)[None, :, None], (32, 1, 3))
    assert cv2.imwrite(str(path), ramp)
    return path


def _no_traceback(res):
    assert "Traceback" not in res.stderr and "Traceback" not in res.stdout, res.stderr


# Each case: (name, args with {d} for the folder, the outputs that exist beforehand)
SINGLE = [
    ("curve_csv", ["curve", KNEE, "--csv", "{d}/o.csv", "--points", "5"], ["o.csv"]),
    ("curve_png", ["curve", KNEE, "--png", "{d}/o.png", "--points", "5"], ["o.png"]),
    ("curve_step", ["curve", KNEE, "--step", "--csv", "{d}/s.csv"], ["s.csv"]),
    ("export_spice", ["export", KNEE, "--spice", "{d}/k.cir", "--points", "5"], ["k.cir"]),
    ("export_clf", ["export", SHOULDER, "--clf", "{d}/k.clf"], ["k.clf"]),
    ("render_still", ["render", "{d}/in.png", "{d}/out.png", "--chain", SHOULDER, "--quiet"],
     ["out.png"]),
    ("preview_snapshot", ["preview", "{d}/in.png", "--chain", SHOULDER, "--snapshot",
                          "{d}/shot.png"], ["shot.png"]),
    ("drift_out", ["drift", KNEE, "--steps", "2", "--out", "{d}/dr"], ["dr/drift.png"]),
    ("spread_out", ["spread", SHOULDER, "--trials", "2", "--quiet", "--out", "{d}/sp"],
     ["sp/spread.json"]),
    ("demo_out", ["demo", "--quick", "--out", "{d}/demo"], ["demo/night_knee.mp4"]),
]
#: Cheap enough to run to the end with --force as well.
FORCE_OK = {"curve_csv", "curve_png", "curve_step", "export_spice", "export_clf",
            "render_still", "drift_out", "spread_out"}


def _args(args, d):
    return [str(a).format(d=d) for a in args]


@pytest.mark.parametrize("name, args, existing", SINGLE, ids=[c[0] for c in SINGLE])
def test_existing_output_is_refused_then_forced(tmp_path, name, args, existing):
    _still(tmp_path / "in.png")
    for rel in existing:
        (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / rel).write_bytes(SENTINEL)
    before = sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*"))
    res = run_cli(*_args(args, tmp_path))
    _no_traceback(res)
    assert res.returncode == 3, (res.returncode, res.stderr)
    assert "--force" in res.stderr
    for rel in existing:
        assert (tmp_path / rel).read_bytes() == SENTINEL  # untouched
    assert sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*")) == before
    if name not in FORCE_OK:
        return
    res = run_cli(*_args(args, tmp_path), "--force")
    assert res.returncode == 0, res.stderr
    for rel in existing:
        assert (tmp_path / rel).read_bytes() != SENTINEL  # replaced
    assert not [p for p in tmp_path.rglob("*") if ".partial" in p.name]


def test_curve_checks_every_output_before_writing_any(tmp_path):
    (tmp_path / "o.png").write_bytes(SENTINEL)
    res = run_cli("curve", KNEE, "--csv", tmp_path / "o.csv", "--png", tmp_path / "o.png",
                  "--points", "5")
    assert res.returncode == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["o.png"]  # no CSV either


# ---- the source is never the output -----------------------------------------------------------
@pytest.mark.parametrize("spelling", ["same", "dotdot", "hardlink", "symlink"])
def test_render_refuses_its_own_source_even_with_force(tmp_path, spelling):
    src = _still(tmp_path / "pic.png")
    data = src.read_bytes()
    (tmp_path / "sub").mkdir()
    out = {"same": src, "dotdot": tmp_path / "sub" / ".." / "pic.png",
           "hardlink": tmp_path / "hard.png", "symlink": tmp_path / "soft.png"}[spelling]
    if spelling == "hardlink":
        os.link(src, out)
    elif spelling == "symlink":
        os.symlink(src, out)
    res = run_cli("render", src, out, "--chain", SHOULDER, "--force", "--quiet")
    _no_traceback(res)
    assert res.returncode == 3, res.stderr
    assert "source" in res.stderr and "itself" in res.stderr
    assert src.read_bytes() == data


# ---- argument errors and unwritable folders leave nothing ------------------------------------
@pytest.mark.parametrize("verb, extra", [
    ("drift", ["--steps", "1"]),
    ("drift", ["--from=-80C"]),
    ("spread", ["--trials", "0"]),
])
def test_argument_errors_leave_no_empty_folder(tmp_path, verb, extra):
    out = tmp_path / "new" / "deeper"
    res = run_cli(verb, KNEE, *extra, "--out", out)
    _no_traceback(res)
    assert res.returncode == 2, res.stderr
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("verb, extra", [("drift", ["--steps", "2"]),
                                         ("spread", ["--trials", "2"]),
                                         ("demo", ["--quick"])])
def test_out_under_a_file_is_exit_3_with_a_message(tmp_path, verb, extra):
    (tmp_path / "plain.txt").write_text("a file, not a folder")
    out = tmp_path / "plain.txt" / "results"
    args = [verb, *([] if verb == "demo" else [KNEE]), *extra, "--out", out]
    res = run_cli(*args)
    _no_traceback(res)
    assert res.returncode == 3, res.stderr
    assert "plain.txt" in res.stderr and "not a folder" in res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plain.txt"]


def test_failure_mid_way_publishes_nothing(tmp_path, monkeypatch, capsys):
    # the plot of spread fails after its CSV and JSON were made: none of the three appears
    from livecurve import cli
    from livecurve.analysis import spread

    def broken(*a, **k):
        raise RuntimeError("plot went wrong")

    monkeypatch.setattr(spread, "spread_figure", broken)
    out = tmp_path / "sp"
    rc = cli.main(["spread", str(SHOULDER), "--trials", "2", "--quiet", "--out", str(out)])
    assert rc == 3
    assert "no output was written" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_existing_folder_gets_all_new_files_at_once(tmp_path):
    out = tmp_path / "dr"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    res = run_cli("drift", KNEE, "--steps", "2", "--out", out)
    assert res.returncode == 0, res.stderr
    assert sorted(p.name for p in out.iterdir()) == ["drift.csv", "drift.png",
                                                     "drift_strip.png", "notes.txt"]
    assert [p.name for p in tmp_path.iterdir()] == ["dr"]  # no temporary folder left


_SPREAD_FULL = """
import os, sys
from livecurve.cli import main
rc = main(["spread", sys.argv[2], "--trials", "40", "--quiet", "--out", sys.argv[1] + "/sp"])
print("LEFT", sorted(os.listdir(sys.argv[1])))
sys.exit(rc)
"""


def test_full_disk_says_disk_full_and_publishes_nothing(tmp_path):
    # A tmpfs too small for the plot, mounted in a private user+mount namespace (util-linux
    # unshare), with a filler leaving ~100 KiB: spread must say "disk full", not blame the
    # PNG encoder, and leave no partial csv/json behind.
    unshare = shutil.which("unshare")
    probe = subprocess.run([unshare, "-r", "-m", "true"], capture_output=True) \
        if unshare else None
    require(probe is not None and probe.returncode == 0,
            "user namespaces (unshare -r -m) to mount a small tmpfs")
    mnt = tmp_path / "small"
    mnt.mkdir()
    script = tmp_path / "run.py"
    script.write_text(_SPREAD_FULL)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run(
        [unshare, "-r", "-m", "sh", "-c",
         'mount -t tmpfs -o size=1m none "$1" && head -c 900k /dev/zero > "$1/filler" && '
         'exec "$2" "$3" "$1" "$4"', "sh", str(mnt), sys.executable, str(script),
         str(SHOULDER)],
        capture_output=True, text=True, timeout=600, cwd=ROOT, env=env)
    assert res.returncode == 3, (res.returncode, res.stderr)
    assert "disk full" in res.stderr, res.stderr
    assert "encoder" not in res.stderr
    assert "Traceback" not in res.stderr
    # the mount is gone with the namespace: the script lists what the run left on it
    assert "LEFT ['filler']" in res.stdout, res.stdout


# ---- stop signals and stale partials -----------------------------------------------------------
def _start(args, cwd):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.Popen([sys.executable, "-m", "livecurve.cli", *map(str, args)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=cwd,
                            env=env)


def _wait_for_partial(folder: Path, proc, timeout_s: float = 240) -> Path:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline and proc.poll() is None:
        found = [p for p in folder.iterdir() if ".partial-" in p.name]
        if found:
            return found[0]
        time.sleep(0.05)
    out, err = proc.communicate(timeout=60) if proc.poll() is not None else ("", "")
    raise AssertionError(f"no partial appeared (exit {proc.poll()}): {err}")


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP, signal.SIGINT])
def test_stop_signal_cleans_up_and_exits_128_plus_n(tmp_path, sig):
    # a long spread: its temporary folder appears at once, the work takes minutes
    proc = _start(["spread", SHOULDER, "--trials", "1000000", "--quiet", "--out", "sp"],
                  tmp_path)
    try:
        _wait_for_partial(tmp_path, proc)
        time.sleep(0.5)
        assert proc.poll() is None, "spread ended before the signal"
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 128 + int(sig), err
    assert "Traceback" not in err and "interrupted" in err
    assert list(tmp_path.iterdir()) == []  # neither the folder nor its temporary


def test_sigterm_during_a_clip_render_leaves_nothing(tmp_path):
    # a single-file output: 60 s of small frames, stopped once encoded frames arrive
    from livecurve.media import _ffmpeg
    src = tmp_path / "long.mp4"
    _ffmpeg.run(["-v", "error", "-y", "-f", "lavfi", "-i",
                 "testsrc2=size=192x108:rate=30:duration=60", "-c:v", "libx264", "-preset",
                 "ultrafast", "-pix_fmt", "yuv420p", str(src)], timeout_s=120)
    outdir = tmp_path / "out"
    outdir.mkdir()
    proc = _start(["render", src, outdir / "graded.mp4", "--chain", SHOULDER, "--quiet"],
                  tmp_path)
    try:
        partial = _wait_for_partial(outdir, proc)
        deadline = time.monotonic() + 120
        while partial.stat().st_size == 0 and time.monotonic() < deadline:
            time.sleep(0.05)
        assert proc.poll() is None, "render ended before the signal"
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 143, err
    assert "Traceback" not in err and "interrupted" in err
    assert list(outdir.iterdir()) == []


def _reaped() -> int:
    child = subprocess.Popen(["true"])
    child.wait()
    return child.pid


def test_killed_run_leaves_partial_that_the_next_run_removes(tmp_path):
    # SIGKILL cannot be caught: the temporary folder stays.  The next run of the same output
    # finds it (its process is gone) and removes it.
    proc = _start(["spread", SHOULDER, "--trials", "1000000", "--quiet", "--out", "sp"],
                  tmp_path)
    try:
        stale = _wait_for_partial(tmp_path, proc)
        proc.kill()
        proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert stale.exists()
    # a partial of a live process (this test) and one of another output are left alone
    live = tmp_path / f".sp.partial-{os.getpid()}-0123abcd"
    live.mkdir()
    other = tmp_path / f".other.partial-{_reaped()}-0123abcd.csv"
    other.write_text("x")
    res = run_cli("spread", SHOULDER, "--trials", "2", "--quiet", "--out", "sp", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert not stale.exists()
    assert live.exists() and other.exists()
    assert sorted(p.name for p in (tmp_path / "sp").iterdir()) == ["spread.csv", "spread.json",
                                                                   "spread.png"]


def test_stale_partial_file_of_a_single_output_is_removed(tmp_path):
    dead = tmp_path / f".o.partial-{_reaped()}-deadbeef.csv"  # its process has ended
    dead.write_text("half a CSV from a killed run")
    old_style = tmp_path / ".o.partial-cafef00d.csv"  # name without a process id
    old_style.write_text("older still")
    res = run_cli("curve", KNEE, "--csv", tmp_path / "o.csv", "--points", "5")
    assert res.returncode == 0, res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["o.csv"]
