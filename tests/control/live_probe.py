"""Runs live-input scenarios in a fresh process whose ALSA configuration is a test's own.

Usage: ``python -m tests.control.live_probe OUTDIR`` with ALSA_CONFIG_PATH pointing at a
configuration that defines the capture devices ``lc_f32`` (mono, FLOAT_LE) and ``lc_s16``
(stereo, S16_LE), each reading a raw file.  PortAudio reads ALSA's configuration once, when
it starts, which is why this runs in its own process.  Results go to OUTDIR/result.json and
OUTDIR/traces.npz; the test compares them with the raw files.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np
import sounddevice as sd

from livecurve.control import ControlMap, parse_source
from livecurve.control.live import LiveInput, find_input, list_inputs
from livecurve.errors import LivecurveError


def _error(fn):
    try:
        fn()
    except LivecurveError as exc:
        return [type(exc).__name__, str(exc)]
    return None


def _wait(cond, timeout_s=20.0):
    end = time.monotonic() + timeout_s
    while not cond() and time.monotonic() < end:
        time.sleep(0.001)
    return cond()


def _capture(live, need):
    """Start, wait for *need* samples, stop; return the held window [lo, hi)."""
    live.start()
    ok = _wait(lambda: live.samples_received >= need)
    live.stop()
    hi = live.samples_received
    lo = live._held(hi)
    return ok, lo, hi


def main(out: Path) -> None:
    res: dict = {"inputs": list_inputs()}
    traces: dict = {}
    res["errors"] = {
        "missing_name": _error(lambda: find_input("no such device")),
        "missing_index": _error(lambda: find_input(57)),
        "ambiguous": _error(lambda: find_input("lc_")),
        "parse": _error(lambda: parse_source("device:no such device")),
        "too_many_channels": _error(lambda: LiveInput("lc_f32", channels=200)),
    }
    dev = parse_source("device:LC_S16:channel=1:rate=48kHz:seconds=0.5:gain=2V")
    res["parsed_device"] = [type(dev).__name__, dev.device_name, dev.channels, dev.channel,
                            dev.sample_rate_hz, dev.capacity, dev.gain_v_per_fs,
                            dev.status.state]
    res["found"] = {"exact_upper": find_input("LC_F32"), "fragment": find_input("s16"),
                    "index_text": find_input(str(find_input("lc_s16")[0]))}

    # float32 mono: the ring's trace against the file
    live = LiveInput("lc_f32", seconds=4)
    res["f32_before_start"] = [str(live.status), float(live.values_at(1.0))]
    ok, lo, hi = _capture(live, 300_000)
    traces["f32"] = live.values_at(np.arange(lo, hi) / live.sample_rate_hz)
    res["f32"] = {"ok": ok, "lo": lo, "hi": hi, "status": str(live.status),
                  "state": live.status.state, "status_ok": live.status.ok,
                  "hold_after": float(live.values_at(1e6)),
                  "newest": float(traces["f32"][-1])}

    # int16 stereo, channel 1 and the mix; ControlMap on the live source
    live = LiveInput("lc_s16", channels=2, channel=1, sample_format="int16", seconds=2)
    ok, lo, hi = _capture(live, 200_000)
    t = np.arange(lo, hi) / live.sample_rate_hz
    traces["s16_ch1"] = live.values_at(t)
    live.channel = "mix"
    traces["s16_mix"] = live.values_at(t)
    live.channel = 1
    res["s16"] = {"ok": ok, "lo": lo, "hi": hi, "state": live.status.state}
    m = ControlMap(live, gain=2.0)
    traces["s16_map"] = m.values_at(t)

    # read_block on a device that does not pace itself: the reader falls behind.  Compile
    # the copy kernel first (on an input that is never started) so that the first read
    # follows the start at once and every block lies well inside the file.
    LiveInput("lc_f32", seconds=1).read_block(1, timeout_s=0.0)
    live = LiveInput("lc_f32", seconds=1)
    live.start()
    starts, blocks = [], []
    for i in range(30):
        if i == 10:  # let the writer lap the ring: the next read must jump ahead
            _wait(lambda: live.samples_received > starts[-1] + 1600 + live.capacity)
        blocks.append(live.read_block(1600, timeout_s=5.0))
        starts.append(live.last_block_start)
    live.stop()
    traces["blocks"] = np.array(blocks)
    res["blocks"] = {"starts": starts, "skipped": live.status.skipped,
                     "starved": live.status.starved}

    # stream ended by PortAudio without stop(): status 'lost', values hold
    live = LiveInput("lc_f32", seconds=1)
    live.start()
    _wait(lambda: live.samples_received > 10_000)
    live._stream.abort()
    lost = _wait(lambda: live.status.state == "lost", 5.0)
    n = live.samples_received
    newest = float(live.values_at((n - 1) / live.sample_rate_hz))
    later = live.values_at([(n + 10) / live.sample_rate_hz, 1e5])
    starved_tail = None
    for _ in range(10):
        b = live.read_block(40_000, timeout_s=0.2)
        if live.status.starved:
            starved_tail = b[-1].item()
            break
    res["lost"] = {"lost": lost, "state": live.status.state, "newest": newest,
                   "later": later.tolist(), "starved": live.status.starved,
                   "starved_tail": starved_tail, "ok": live.status.ok}
    live.stop()

    # the callback seam, driven with PortAudio's own flag type on an unstarted input
    live = LiveInput("lc_f32", seconds=0.001)  # smallest ring: 1024 rows
    cap = live.capacity
    ramp = (np.arange(5000, dtype=np.float32) / 8192.0)[:, None]
    pos = 0
    for i, size in enumerate([300, 300, 300, 300, 250, 2000]):
        flags = sd.CallbackFlags(2 if i == 2 else 0)  # 2 = paInputOverflow
        live._callback(ramp[pos:pos + size], size, None, flags)
        pos += size
    hi = live.samples_received
    lo = live._held(hi)
    traces["seam"] = live.values_at(np.arange(lo, hi) / live.sample_rate_hz)
    res["seam"] = {"cap": cap, "lo": lo, "hi": hi, "pos": pos, "state": live.status.state,
                   "overflows": live.status.overflows, "ok": live.status.ok}

    np.savez(out / "traces.npz", **traces)
    (out / "result.json").write_text(json.dumps(res, indent=1))


if __name__ == "__main__":
    main(Path(sys.argv[1]))
