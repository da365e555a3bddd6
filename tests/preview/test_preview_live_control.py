"""The preview's control trace from a live audio device matches the device's samples.

The capture device is an ALSA ``type file`` PCM wrapped in ``type plug`` (alsa-lib PCM
plugin documentation), backed by a known raw float32 file, loaded through
ALSA_CONFIG_PATH in a child process (PortAudio reads ALSA's configuration once, at start;
Debian libportaudio2).  The file device does not pace itself, so the preview must not
assume real time: a live input's frame is the newest frame period of audio by its own
sample count.  Expected values follow the knob mapping of ``--control KNOB=SOURCE``
(docs: −1 … +1 V sweep the knob linearly over min … max) with linear interpolation between
samples.
"""

from __future__ import annotations

import ctypes.util
import os
import subprocess
import sys
from pathlib import Path

import cv2
import numpy as np

from livecurve.config.chainfile import load_chain
from tests.conftest import require

ROOT = Path(__file__).resolve().parents[2]
RATE = 48000


def test_preview_trace_follows_live_device(tmp_path):
    require(ctypes.util.find_library("portaudio") is not None,
            "PortAudio library (Debian libportaudio2)")
    require(Path("/usr/share/alsa/alsa.conf").is_file(), "ALSA configuration alsa.conf")
    rng = np.random.default_rng(7)
    # 10 minutes (115 MB): the unpaced file device runs ~500× real time here, and the
    # frames must be read before it reaches the end of the file (checked below)
    samples = np.clip(rng.normal(0.0, 0.3, 600 * RATE), -0.99, 0.99).astype("<f4")
    raw = tmp_path / "tone.raw"
    samples.tofile(raw)
    conf = tmp_path / "asoundrc"
    conf.write_text(
        "</usr/share/alsa/alsa.conf>\n"
        "pcm.lc_f32 {\n  type plug\n  slave {\n    pcm {\n      type file\n"
        "      slave.pcm \"null\"\n      file \"/dev/null\"\n"
        f"      infile \"{raw}\"\n      format \"raw\"\n    }}\n"
        f"    format FLOAT_LE\n    channels 1\n    rate {RATE}\n  }}\n}}\n")
    still = tmp_path / "grey.png"
    cv2.imwrite(str(still), np.full((90, 160, 3), 128, np.uint8))
    chain = ROOT / "configs" / "night_knee.toml"
    env = dict(os.environ, ALSA_CONFIG_PATH=str(conf),
               PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    # The device may outrun the whole file before the frames are read when the machine
    # stalls the child for a moment; such a run proves nothing either way, so it is run
    # again (at most three times) — never accepted.
    for attempt in range(3):
        out = tmp_path / f"out{attempt}"
        out.mkdir()
        run = subprocess.run([sys.executable, "-m", "tests.preview.live_preview_probe", str(out),
                              str(still), str(chain)], cwd=ROOT, env=env, capture_output=True,
                             text=True, timeout=300)
        assert run.returncode == 0, f"probe failed:\n{run.stdout}\n{run.stderr[-3000:]}"
        with np.load(out / "trace.npz") as z:
            if z["times"].max() * RATE < samples.size - 1:
                break
    else:
        raise AssertionError(f"the file device ran past its file in 3 runs:\n{run.stdout}")
    with np.load(out / "trace.npz") as z:
        values, times = z["values"], z["times"]
    ls = load_chain(chain).live["knee_current"]
    mid, half = 0.5 * (ls.lo + ls.hi), 0.5 * (ls.hi - ls.lo)
    for v, t in zip(values, times, strict=True):
        idx = t * RATE
        assert idx.min() >= 0 and idx.max() < samples.size  # read inside the file
        expected = mid + half * np.interp(idx, np.arange(samples.size), samples)
        # the rows of one frame span one frame period of the device's own samples
        assert t[-1] - t[0] < 1.0 / 25
        np.testing.assert_allclose(v, expected, rtol=0, atol=1e-12 + 1e-6 * half)
    # frames move on through the file (the device is read, not a frozen value)
    assert times[-1][0] > times[0][0]
    assert np.ptp(values) > 0.1 * half
