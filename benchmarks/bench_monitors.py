"""Time each monitor on one 1920×1080 frame; write benchmarks/monitors.json.

Not a test: figures depend on the machine and on what else runs on it, so the
JSON records the load average before and after, and both the best and the
median time of each step.  Run from the repository root:

    python3 benchmarks/bench_monitors.py [--repeat 30] [--out benchmarks/monitors.json]

The frame is synthetic (our own demo picture: 75 % bars over the top third,
smooth colour ramps with a little noise below), in space "ypbpr", BT.709.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _machine import runtime_info  # noqa: E402  (benchmarks/ is on sys.path)

from livecurve.media.atomic import atomic_output  # noqa: E402
from livecurve.monitors import draw  # noqa: E402
from livecurve.monitors import planes as planes_mod  # noqa: E402
from livecurve.monitors.alarms import level_alarms, zebra_mask  # noqa: E402
from livecurve.monitors.flash import FlashMeter  # noqa: E402
from livecurve.monitors.transfer import transfer_view  # noqa: E402
from livecurve.monitors.vectorscope import vectorscope  # noqa: E402
from livecurve.monitors.waveform import waveform  # noqa: E402
from livecurve.signal.component import Y_SPAN_V, rgb_to_ypbpr_matrix  # noqa: E402

H, W = 1080, 1920


def demo_frame(seed: int = 1) -> np.ndarray:
    """Planar float32 Y′PbPr (centred volts) of a synthetic 1080p picture."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:H, 0:W].astype(np.float32)
    rgb = np.empty((H, W, 3), np.float32)
    rgb[..., 0] = 0.5 + 0.45 * np.sin(x / 310.0 + y / 500.0)
    rgb[..., 1] = 0.45 + 0.4 * np.cos(y / 260.0 - x / 900.0)
    rgb[..., 2] = x / W
    bars = np.array([[1, 1, 1], [1, 1, 0], [0, 1, 1], [0, 1, 0], [1, 0, 1], [1, 0, 0],
                     [0, 0, 1]], np.float32) * 0.75
    rgb[: H // 3] = bars[(np.arange(W) * 7 // W)][None]
    rgb += rng.normal(0, 0.01, rgb.shape).astype(np.float32)
    comp = np.einsum("ij,hwj->ihw", rgb_to_ypbpr_matrix("bt709").astype(np.float32), rgb)
    comp *= Y_SPAN_V
    comp[0] -= Y_SPAN_V / 2
    return np.ascontiguousarray(comp, dtype=np.float32)


def timed(fn, repeat: int) -> dict:
    """Wall time with the threaded kernels, and CPU time of the one-thread kernels.

    The CPU time of the single-thread run measures the work itself; it moves far
    less than wall time when other processes share the two cores.
    """
    fn()  # warm (compile or load from cache)
    ts = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    saved = planes_mod.PARALLEL_MIN_SAMPLES
    planes_mod.PARALLEL_MIN_SAMPLES = 1 << 62
    try:
        fn()
        cs = []
        for _ in range(repeat):
            c0 = time.thread_time()
            fn()
            cs.append(time.thread_time() - c0)
    finally:
        planes_mod.PARALLEL_MIN_SAMPLES = saved
    ts = np.array(ts) * 1e3
    cs = np.array(cs) * 1e3
    return {"best_ms": round(float(ts.min()), 3), "median_ms": round(float(np.median(ts)), 3),
            "one_thread_cpu_best_ms": round(float(cs.min()), 3)}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=30)
    ap.add_argument("--out", default=str(Path(__file__).with_name("monitors.json")))
    args = ap.parse_args(argv)

    planes = demo_frame()
    noise = np.random.default_rng(2).uniform(-0.35, 0.35, planes.shape).astype(np.float32)
    conv = np.array([[-0.36, 0.36]] * 3)
    cin = np.linspace(-0.4, 0.4, 1025)
    cout = np.tanh(3 * cin) / 3
    wf3 = np.empty((3, 256, W), np.uint32)
    wf_bin = np.empty((3, 256, 640), np.uint32)
    vs = np.empty((257, 257), np.uint32)
    mask = np.empty((H, W), np.uint8)
    bgr = np.zeros((H, W, 3), np.uint8)
    meter = FlashMeter(30.0)
    panel_wf = np.empty((270, 720, 3), np.uint8)
    panel_vs = np.empty((270, 270, 3), np.uint8)
    panel_tr = np.empty((270, 360, 3), np.uint8)
    panel_al = np.empty((120, 360, 3), np.uint8)

    load_before = os.getloadavg()
    r = args.repeat
    res = {}
    res["waveform_luma"] = timed(lambda: waveform(planes, space="ypbpr", channels=(0,),
                                                  out=wf3), r)
    res["waveform_3ch"] = timed(lambda: waveform(planes, space="ypbpr", out=wf3), r)
    res["waveform_3ch_640cols"] = timed(lambda: waveform(planes, space="ypbpr", columns=640,
                                                         out=wf_bin), r)
    res["waveform_3ch_uniform_noise"] = timed(lambda: waveform(noise, space="ypbpr", out=wf3), r)
    res["vectorscope_ypbpr"] = timed(lambda: vectorscope(planes, space="ypbpr",
                                                         standard="bt709", out=vs), r)
    res["vectorscope_rgb"] = timed(lambda: vectorscope(planes, space="rgb", standard="bt709",
                                                       out=vs), r)
    res["transfer_view_128bins"] = timed(lambda: transfer_view(cin, cout, planes, bins=128), r)
    res["level_alarms"] = timed(lambda: level_alarms(planes, space="ypbpr",
                                                     converter_limits_v=conv), r)
    res["zebra_mask"] = timed(lambda: zebra_mask(planes, space="ypbpr", converter_limits_v=conv,
                                                 out=mask), r)
    res["flash_push_step2"] = timed(lambda: meter.push(planes), r)

    counts = waveform(planes, space="ypbpr", columns=640)
    hist = vectorscope(planes, space="ypbpr", standard="bt709")
    view = transfer_view(cin, cout, planes, bins=128)
    alarms = level_alarms(planes, space="ypbpr", converter_limits_v=conv)
    zmask = zebra_mask(planes, space="ypbpr", converter_limits_v=conv)
    res["draw_waveform_720x270"] = timed(lambda: draw.draw_waveform(
        counts, space="ypbpr", size=(270, 720), out=panel_wf), r)
    res["draw_vectorscope_270"] = timed(lambda: draw.draw_vectorscope(
        hist, standard="bt709", size=270, out=panel_vs), r)
    res["draw_transfer_360x270"] = timed(lambda: draw.draw_transfer(
        view, size=(270, 360), out=panel_tr), r)
    res["draw_alarms_360x120"] = timed(lambda: draw.draw_alarms(
        alarms, size=(120, 360), out=panel_al), r)
    res["zebra_overlay_1080p"] = timed(lambda: draw.zebra_overlay(bgr, zmask, out=bgr), r)
    tiles = [("picture", bgr), ("waveform", panel_wf), ("vectorscope", panel_vs),
             ("transfer", panel_tr)]
    canvas = draw.compose(tiles, columns=2, tile_size=(360, 640))
    res["compose_4_tiles_1284x724"] = timed(lambda: draw.compose(
        tiles, columns=2, tile_size=(360, 640), out=canvas), r)
    load_after = os.getloadavg()

    doc = {
        "what": "ms per 1920x1080 frame for each monitor step: wall time with threads "
                "(best and median of repeats) and best CPU time of the one-thread kernels",
        "frame": "synthetic demo picture, ypbpr BT.709, planar float32 (3, 1080, 1920)",
        "repeat": r,
        **runtime_info(),
        "load_average_before": [round(v, 2) for v in load_before],
        "load_average_after": [round(v, 2) for v in load_after],
        "results": res,
    }
    out = Path(args.out)
    with atomic_output(out, force=True) as tmp:  # written whole or not at all
        tmp.write_text(json.dumps(doc, indent=2) + "\n")
    for k, v in res.items():
        print(f"{k:30s} best {v['best_ms']:7.2f} ms  median {v['median_ms']:7.2f} ms  "
              f"one-thread CPU {v['one_thread_cpu_best_ms']:7.2f} ms")
    print(f"load average before {load_before}, after {load_after}; wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
