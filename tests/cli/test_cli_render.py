"""``livecurve render`` and ``livecurve demo`` run as a user runs them: the installed command in
a subprocess, checked by exit code, messages and the files it leaves.

References:
* Exit codes: livecurve.errors — bad input (LivecurveError) 2, an output that could not be
  written (OutputError) 3; never a traceback for bad input.
* The output is read back with livecurve.media.probe and the bundled ffmpeg; audio packets are
  compared with ffmpeg's md5 muxer over ``-map 0:a -c copy`` (a stream copy hashes the packets
  themselves, so equal hashes mean bit-identical audio).
* PNG bit depth: byte 24 of a PNG file is the IHDR bit depth (RFC 2083 / ISO/IEC 15948).
* Ctrl-C in a terminal sends SIGINT to the whole foreground process group (POSIX job control;
  common practice), so the test signals the group: livecurve and its ffmpeg child together.
"""

from __future__ import annotations

import os
import signal
import subprocess
import time

import numpy as np
import pytest

from livecurve.media import _ffmpeg
from livecurve.media.probe import probe
from livecurve.outputs.demo import chain_path
from tests.conftest import require_exe

TIMEOUT_S = 300


def ffmpeg(*args: str) -> bytes:
    res = _ffmpeg.run(["-v", "error", *args], timeout_s=120)
    if res.returncode != 0:
        pytest.fail(f"ffmpeg {' '.join(args)} failed: {res.stderr.decode()[-800:]}")
    return res.stdout


def audio_md5(path) -> str:
    return ffmpeg("-i", str(path), "-map", "0:a", "-c", "copy", "-f", "md5", "-").decode().strip()


def livecurve(*args, cwd=None) -> subprocess.CompletedProcess:
    exe = require_exe("livecurve")
    return subprocess.run([exe, *map(str, args)], capture_output=True, text=True,
                          timeout=TIMEOUT_S, cwd=cwd)


def _no_traceback(res):
    assert "Traceback" not in res.stderr and "Traceback" not in res.stdout


@pytest.fixture(scope="module")
def clip(tmp_path_factory):
    """1 s, 320×180 at 30 frame/s, H.264 test pattern with 48 kHz AAC (ffmpeg lavfi)."""
    p = tmp_path_factory.mktemp("cli_src") / "src.mp4"
    ffmpeg("-y", "-f", "lavfi", "-i", "testsrc2=size=320x180:rate=30:duration=1",
           "-f", "lavfi", "-i", "sine=frequency=440:sample_rate=48000:duration=1",
           "-c:v", "libx264", "-pix_fmt", "yuv420p", "-c:a", "aac", "-shortest", str(p))
    return p


def test_render_side_by_side_keeps_frames_rate_and_audio(tmp_path, clip):
    out = tmp_path / "graded.mp4"
    res = livecurve("render", clip, out, "--chain", chain_path("film_shoulder"),
                    "--side-by-side", "--quiet")
    assert res.returncode == 0, res.stderr
    _no_traceback(res)
    assert f"wrote {out}: 30 frames" in res.stdout
    src, got = probe(clip), probe(out)
    assert (got.width, got.height) == (2 * src.width, src.height) == (640, 180)
    assert got.n_frames == src.n_frames == 30 and got.n_frames_exact
    assert got.fps == pytest.approx(30.0)
    assert audio_md5(out) == audio_md5(clip)
    assert [p.name for p in tmp_path.iterdir()] == ["graded.mp4"]


def test_existing_output_needs_force(tmp_path, clip):
    out = tmp_path / "graded.mp4"
    out.write_bytes(b"do not overwrite")
    args = ("render", clip, out, "--chain", chain_path("shadow_crush"), "--quiet",
            "--duration", "0.3")
    res = livecurve(*args)
    assert res.returncode == 3
    _no_traceback(res)
    assert str(out) in res.stderr and "--force" in res.stderr
    assert out.read_bytes() == b"do not overwrite"
    res = livecurve(*args, "--force")
    assert res.returncode == 0, res.stderr
    got = probe(out)
    assert (got.width, got.height, got.n_frames) == (320, 180, 9)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["graded.mp4"]


def test_corrupt_input_exit_code_2_without_traceback(tmp_path):
    bad = tmp_path / "holiday.mp4"
    bad.write_bytes(np.random.default_rng(11).integers(0, 256, 40_000, np.uint8).tobytes())
    out = tmp_path / "out.mp4"
    res = livecurve("render", bad, out, "--chain", chain_path("shadow_crush"), "--quiet")
    assert res.returncode == 2
    _no_traceback(res)
    assert res.stderr.startswith("livecurve: ") and str(bad) in res.stderr
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["holiday.mp4"]


def test_unknown_control_name_exit_code_2(tmp_path, clip):
    res = livecurve("render", clip, tmp_path / "o.mp4", "--chain", chain_path("night_knee"),
                    "--control", "knee_curent=lfo:sine:2Hz:1V", "--quiet")
    assert res.returncode == 2
    _no_traceback(res)
    assert "knee_curent" in res.stderr and "knee_current" in res.stderr
    assert list(tmp_path.iterdir()) == []


def test_ctrl_c_mid_render_leaves_nothing(tmp_path):
    # 60 s of tiny frames: far longer than the second or so the test lets it run
    src = tmp_path / "src" / "long.mp4"
    src.parent.mkdir()
    ffmpeg("-y", "-f", "lavfi", "-i", "testsrc2=size=192x108:rate=30:duration=60",
           "-c:v", "libx264", "-preset", "ultrafast", "-pix_fmt", "yuv420p", str(src))
    outdir = tmp_path / "out"
    outdir.mkdir()
    out = outdir / "graded.mp4"
    proc = subprocess.Popen([require_exe("livecurve"), "render", str(src), str(out), "--chain",
                             str(chain_path("shadow_crush"))],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    try:
        deadline = time.monotonic() + 120
        partial = None
        while time.monotonic() < deadline and proc.poll() is None:
            names = [p for p in outdir.iterdir() if ".partial" in p.name]
            if names and names[0].stat().st_size > 0:  # encoded frames are arriving
                partial = names[0]
                break
            time.sleep(0.05)
        assert partial is not None and proc.poll() is None, "render never got under way"
        time.sleep(0.5)
        assert proc.poll() is None, "render finished before it could be interrupted"
        os.killpg(proc.pid, signal.SIGINT)
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 130, stderr  # 128 + SIGINT (2), the shell convention
    assert "Traceback" not in stderr
    assert str(out) in stderr and "interrupted" in stderr and "no output was written" in stderr
    assert list(outdir.iterdir()) == []  # neither the output nor the temporary file


def test_demo_quick_writes_its_files(tmp_path):
    out = tmp_path / "demo"
    res = livecurve("demo", "--quick", "--out", out)
    assert res.returncode == 0, res.stderr
    _no_traceback(res)
    names = sorted(p.name for p in out.iterdir())
    assert names == ["night_knee.cir", "night_knee.mp4", "night_knee_before_after.png",
                     "night_knee_curve.csv", "night_knee_curve.png"]
    clip = probe(out / "night_knee.mp4")  # two seconds of the 1280×720 demo, side by side
    assert (clip.width, clip.height, clip.n_frames) == (2560, 720, 60)
    assert clip.fps == pytest.approx(30.0) and clip.has_audio
    ba = (out / "night_knee_before_after.png").read_bytes()
    assert ba[:8] == b"\x89PNG\r\n\x1a\n" and ba[24] == 16  # 16-bit (RFC 2083 IHDR)
    rows = (out / "night_knee_curve.csv").read_text().splitlines()
    assert rows[0] == "input_v,out0_v,out1_v,out2_v" and len(rows) == 402
    table = np.array([[float(x) for x in r.split(",")] for r in rows[1:]])
    assert np.all(np.diff(table[:, 0]) > 0)
    np.testing.assert_array_equal(table[:, 2], table[:, 0])  # Pb passes through night_knee
    deck = (out / "night_knee.cir").read_text()
    assert deck.rstrip().endswith(".end") and ".dc VIN" in deck
    # a second run into the same, now full, folder is refused without --force
    res = livecurve("demo", "--quick", "--out", out)
    assert res.returncode == 3 and "--force" in res.stderr
    _no_traceback(res)
