"""Live input through a real PortAudio → ALSA device path backed by known sample files.

The capture devices are ALSA ``type file`` PCMs (alsa-lib PCM plugin documentation: the
``file`` plugin with ``infile`` reads capture data from a file, the slave — here the
``null`` PCM — provides the timing, which is none) wrapped in ``type plug``.  The plug must
not convert formats: with a conversion between the program and the file plugin, alsa-lib
drops and repeats blocks of the file (seen here: jumps every 383 frames), so each device's
slave format is the one the stream asks for (FLOAT_LE for float32, S16_LE for int16).  The
configuration is loaded through ALSA_CONFIG_PATH in a child process, because PortAudio reads
it once when it starts.  The file device reads as fast as it is asked and returns stale data
after the end of its file, so the files are longer than anything the test captures.
"""

from __future__ import annotations

import ctypes.util
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.signal

from tests.conftest import require

ROOT = Path(__file__).resolve().parents[2]
RATE = 48000
N_F32 = 60 * RATE  # 60 s of mono float32 (11.5 MB)
N_S16 = 40 * RATE  # 40 s of stereo int16 (7.7 MB)


def _asoundrc(tmp: Path, f32: Path, s16: Path) -> Path:
    def dev(name, raw, fmt, channels):
        return (f"pcm.{name} {{\n  type plug\n  slave {{\n    pcm {{\n      type file\n"
                f"      slave.pcm \"null\"\n      file \"/dev/null\"\n"
                f"      infile \"{raw}\"\n      format \"raw\"\n    }}\n"
                f"    format {fmt}\n    channels {channels}\n    rate {RATE}\n  }}\n}}\n")
    text = ("</usr/share/alsa/alsa.conf>\n" + dev("lc_f32", f32, "FLOAT_LE", 1)
            + dev("lc_s16", s16, "S16_LE", 2))
    path = tmp / "asoundrc"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def probe(tmp_path_factory):
    require(ctypes.util.find_library("portaudio") is not None,
            "PortAudio library (Debian libportaudio2)")
    require(ctypes.util.find_library("asound") is not None, "ALSA library (libasound2)")
    require(Path("/usr/share/alsa/alsa.conf").is_file(), "ALSA configuration alsa.conf")
    tmp = tmp_path_factory.mktemp("alsa")
    rng = np.random.default_rng(1234)
    f32 = np.clip(rng.normal(0, 0.25, N_F32), -0.99, 0.99).astype("<f4")
    f32.tofile(tmp / "mono_f32.raw")
    s16 = rng.integers(-32768, 32767, size=(N_S16, 2), endpoint=True).astype("<i2")
    s16.tofile(tmp / "stereo_s16.raw")
    conf = _asoundrc(tmp, tmp / "mono_f32.raw", tmp / "stereo_s16.raw")
    out = tmp / "out"
    out.mkdir()
    env = dict(os.environ, ALSA_CONFIG_PATH=str(conf),
               PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    run = subprocess.run([sys.executable, "-m", "tests.control.live_probe", str(out)],
                         cwd=ROOT, env=env, capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, f"live probe failed:\n{run.stdout}\n{run.stderr[-4000:]}"
    res = json.loads((out / "result.json").read_text())
    with np.load(out / "traces.npz") as z:
        traces = {k: z[k] for k in z.files}
    return res, traces, f32, s16


def _offset(trace, ref):
    """Start of *trace* inside *ref*, by FFT cross-correlation (scipy.signal.correlate)."""
    c = scipy.signal.correlate(ref, trace - trace.mean(), mode="valid", method="fft")
    return int(np.argmax(c))


def test_devices_are_listed(probe):
    res, *_ = probe
    names = {name: (ch, rate) for _, name, ch, rate in res["inputs"]}
    assert "lc_f32" in names and "lc_s16" in names
    assert res["found"]["exact_upper"][1] == "lc_f32"
    assert res["found"]["fragment"][1] == "lc_s16"
    assert res["found"]["index_text"][1] == "lc_s16"


def test_device_form_of_the_control_grammar(probe):
    res, *_ = probe
    # device:NAME with options opens (not starts) a LiveInput with enough channels
    assert res["parsed_device"] == ["LiveInput", "lc_s16", 2, 1, 48000.0, 24000, 2.0, "idle"]


def test_missing_devices_name_the_ones_that_exist(probe):
    res, *_ = probe
    for key in ("missing_name", "missing_index", "ambiguous", "parse", "too_many_channels"):
        kind, msg = res["errors"][key]
        assert kind == "DeviceError", (key, msg)
    for key in ("missing_name", "missing_index", "parse"):
        msg = res["errors"][key][1]
        assert "lc_f32" in msg and "lc_s16" in msg, msg
    assert "no such device" in res["errors"]["missing_name"][1]
    assert "57" in res["errors"]["missing_index"][1]
    assert "several" in res["errors"]["ambiguous"][1]


def test_float32_capture_reads_the_file_in_order(probe):
    res, traces, f32, _ = probe
    r = res["f32"]
    assert r["ok"] and r["state"] == "stopped" and r["status_ok"], r
    assert r["hi"] < N_F32  # never read past the end of the file (stale data there)
    trace = traces["f32"]
    assert trace.size == r["hi"] - r["lo"] >= 100_000
    start = _offset(trace, f32[: r["hi"] + 50_000].astype(np.float64))
    # sample k of the stream is sample k of the file: time is counted in samples received
    assert start == r["lo"], (start, r["lo"])
    np.testing.assert_array_equal(trace, f32[start:start + trace.size])
    # after stop, later times hold the newest value
    assert r["hold_after"] == r["newest"] == float(f32[r["hi"] - 1])
    assert res["f32_before_start"] == ["idle: 0 samples, 0 overflow(s), 0 skipped, 0 held", 0.0]


def test_int16_stereo_capture_channel_and_mix(probe):
    res, traces, _, s16 = probe
    r = res["s16"]
    assert r["ok"] and r["hi"] < N_S16
    start = _offset(traces["s16_ch1"], s16[: r["hi"] + 50_000, 1].astype(np.float64))
    assert start == r["lo"]
    seg = s16[start:start + traces["s16_ch1"].size].astype(np.float64)
    # 16-bit PCM full scale is 32768
    np.testing.assert_array_equal(traces["s16_ch1"], seg[:, 1] / 32768)
    np.testing.assert_allclose(traces["s16_mix"], seg.mean(axis=1) / 32768, rtol=0, atol=1e-15)
    np.testing.assert_array_equal(traces["s16_map"], 2.0 * seg[:, 1] / 32768)


def test_read_block_returns_file_samples_at_their_own_times(probe):
    res, traces, f32, _ = probe
    b = res["blocks"]
    starts = np.array(b["starts"])
    assert np.all(np.diff(starts) >= 1600)  # blocks follow each other, never overlap
    assert starts[-1] + 1600 < N_F32
    for s, block in zip(starts, traces["blocks"], strict=True):
        np.testing.assert_array_equal(block, f32[s:s + 1600])
    # before block 10 the probe waited until the writer had lapped the ring, so that read
    # had to jump ahead; every jump is counted as skipped samples
    assert starts[10] - starts[9] > 1600
    assert b["skipped"] == starts[-1] + 1600 - 30 * 1600
    assert b["starved"] == 0


def test_stream_ended_without_stop_is_reported_lost_and_values_hold(probe):
    res, *_ = probe
    r = res["lost"]
    assert r["lost"] and r["state"] == "lost" and not r["ok"]
    assert r["later"] == [r["newest"], r["newest"]]
    assert r["starved"] > 0 and r["starved_tail"] == r["newest"]


def test_callback_seam_wraps_the_ring_and_counts_overflows(probe):
    res, traces, *_ = probe
    r = res["seam"]
    assert r["cap"] == 1024 and r["hi"] == r["pos"] == 3450
    assert r["overflows"] == 1 and r["state"] == "idle" and not r["ok"]
    assert r["lo"] == r["hi"] - r["cap"] + r["cap"] // 8
    want = np.arange(r["lo"], r["hi"], dtype=np.float32) / 8192.0
    np.testing.assert_array_equal(traces["seam"], want)
