"""The demo clip in clips/: made by clips/make_demo_clip.py, small, with a 120 BPM beat.

Reference: the script's own specification (1280×720, 30 Hz, 6 s, 48 kHz audio, kick
on every beat at 120 BPM = every 0.5 s).  The committed clip must still match what
the script draws (first frame, after lossy coding), so a stale clip is caught.
"""

from __future__ import annotations

import importlib.util

import numpy as np
import pytest

from livecurve.media import _ffmpeg, open_source, probe
from tests.media.conftest import DEMO, REPO

AUDIO_RATE = 48_000


def _script():
    spec = importlib.util.spec_from_file_location("make_demo_clip",
                                                  REPO / "clips" / "make_demo_clip.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_clip_is_commit_sized_and_as_specified():
    assert DEMO.stat().st_size < 5_000_000
    info = probe(DEMO)
    assert (info.width, info.height, info.fps, info.n_frames) == (1280, 720, 30.0, 180)
    assert info.has_audio and info.audio_rate == AUDIO_RATE


def test_first_frame_matches_the_script():
    mod = _script()
    drawn = next(mod.render_frames()).astype(np.float64)
    with open_source(DEMO) as src:
        decoded = next(src).rgb.astype(np.float64)
    mse = np.mean((drawn - decoded) ** 2)
    psnr_db = 10 * np.log10(255.0 ** 2 / mse)
    # H.264 at crf 18 with 4:2:0 chroma on a synthetic picture: well above 30 dB
    assert psnr_db > 30.0, psnr_db


def test_kick_on_every_beat_at_120_bpm():
    res = _ffmpeg.run(["-v", "error", "-i", str(DEMO), "-map", "0:a", "-f", "f32le", "-ac",
                       "1", "-ar", str(AUDIO_RATE), "-"])
    assert res.returncode == 0
    a = np.frombuffer(res.stdout, np.float32).astype(np.float64)
    assert len(a) / AUDIO_RATE == pytest.approx(6.0, abs=0.03)

    def rms(t0, t1):
        return np.sqrt(np.mean(a[int(round(t0 * AUDIO_RATE)):int(round(t1 * AUDIO_RATE))] ** 2))

    win = 0.03
    beat = [rms(t, t + win) / rms(t - win, t) for t in np.arange(1, 12) * 0.5]
    loud = [rms(t, t + win) for t in np.arange(1, 12) * 0.5]
    assert rms(0.0, win) > 0.8 * min(loud)  # the clip opens on a kick as loud as the rest
    off = [rms(t, t + win) / rms(t - win, t) for t in np.arange(0, 12) * 0.5 + 0.25]
    # a kick every 0.5 s: a sharp rise on each beat, weaker ones (bass notes) between
    assert min(beat) > 4.0, beat
    assert max(off) < min(beat), (off, beat)


def test_script_refuses_to_overwrite(tmp_path, capsys):
    target = tmp_path / "demo.mp4"
    target.write_bytes(b"old")
    assert _script().main(["--out", str(target)]) == 3
    assert "exists; use --force" in capsys.readouterr().err
    assert target.read_bytes() == b"old"
