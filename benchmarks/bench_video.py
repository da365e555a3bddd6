"""Time the video path per 1080p frame and the render speed of the demo clip; write
benchmarks/video.json.

Not a test: the figures depend on the machine and on whatever else runs on it (these
2-core machines are often shared, so the JSON records the load average before and after
each part, and both the best and the median of the repeats).  Run from the repository root:

    python3 benchmarks/bench_video.py [--repeat 15] [--out benchmarks/video.json]
                                      [--no-render]

Per 1920×1080 frame, in one run, numba with 2 threads:

* decode → volts: ``signal.levels.codes_to_volts`` (R′G′B′ codes to planar centred volts);
* each demo chain's ``FrameEngine.process`` with static tables (and line filters);
* night_knee with its knee current modulated per line against the same chain static
  (the ratio; goal ≤ 1.3×), and per pixel; with and without evaluating the control source;
* the output converter, ``signal.levels.volts_to_codes``;
* the whole ``FrameFlow.process`` (codes in, codes out) for each chain.

Render: the 1280×720 demo clip (6 s, 180 frames) through each demo chain to H.264 with
``outputs.render.render`` (end to end: decode, chain, encode, audio copy), and the ceiling of
decode → encode with no processing (the same source and ClipWriter settings).

The 1080p picture is frame 60 of the demo clip scaled up with OpenCV (bicubic), so the
tables see a real picture's values.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import cv2
import numba
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _machine import runtime_info  # noqa: E402  (benchmarks/ is on sys.path)

from livecurve.config.chainfile import load_chain  # noqa: E402
from livecurve.engine.frameflow import FrameFlow, bind_controls  # noqa: E402
from livecurve.engine.pipeline import FrameEngine  # noqa: E402
from livecurve.media.atomic import atomic_output  # noqa: E402
from livecurve.media.source import open_source  # noqa: E402
from livecurve.outputs.demo import DEMO_CHAINS, chain_path, demo_clip  # noqa: E402
from livecurve.signal.levels import codes_to_volts, volts_to_codes  # noqa: E402
from livecurve.signal.timing import ClipTiming, get_format  # noqa: E402

H, W = 1080, 1920
MODULATION_GOAL = 1.3


def timed(fn, repeat: int) -> dict:
    """Best and median wall time of *fn* in ms, after one warm-up call."""
    fn()
    ts = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    ts = np.array(ts) * 1e3
    return {"best_ms": round(float(ts.min()), 2), "median_ms": round(float(np.median(ts)), 2)}


def demo_frame_1080p() -> tuple[int, np.ndarray]:
    with open_source(str(demo_clip()), start_s=2.0, duration_s=0.04) as src:
        fr = next(iter(src))
    big = cv2.resize(fr.rgb, (W, H), interpolation=cv2.INTER_CUBIC)
    return fr.index, np.ascontiguousarray(big)


def frame_figures(repeat: int) -> dict:
    index, rgb = demo_frame_1080p()
    res: dict = {}
    planes = np.empty((3, H, W), np.float32)
    out = np.empty((3, H, W), np.float32)
    codes = np.empty((H, W, 3), np.uint8)
    res["codes_to_volts_ypbpr"] = timed(lambda: codes_to_volts(
        rgb, space="ypbpr", standard="bt709", out=planes), repeat)
    res["codes_to_volts_rgb"] = timed(lambda: codes_to_volts(
        rgb, space="rgb", standard="bt709", out=planes), repeat)
    fmt = get_format("1080p30")
    timing = ClipTiming(fmt, W, H)
    engine_kw = {"pixel_period_s": timing.pixel_period_s, "lead_in_samples": timing.blank_samples}
    for name in DEMO_CHAINS:
        spec = load_chain(chain_path(name))
        codes_to_volts(rgb, space=spec.space, standard="bt709", out=planes)
        eng = FrameEngine(spec, **engine_kw)
        res[f"engine_static_{name}"] = timed(lambda e=eng: e.process(planes, out=out), repeat)
        if name == DEMO_CHAINS[0]:
            res["volts_to_codes"] = timed(lambda s=spec: volts_to_codes(
                out, space=s.space, standard="bt709", converter_bits=s.converter_bits,
                converter_legal=s.converter_legal, out=codes), repeat)
        flow = FrameFlow(spec, width=W, height=H, fps=30.0, clip_matrix="bt709")
        res[f"frameflow_static_{name}"] = timed(lambda f=flow: f.process(rgb, index), repeat)

    # night_knee: knee current per line / per pixel vs static
    spec = load_chain(chain_path("night_knee"))
    codes_to_volts(rgb, space=spec.space, standard="bt709", out=planes)
    ls = spec.live["knee_current"]
    rows_t = timing.row_time_s(index)
    mid, half = 0.5 * (ls.lo + ls.hi), 0.5 * (ls.hi - ls.lo)
    per_row = mid + 0.5 * half * np.sin(2 * np.pi * 1e3 * rows_t)
    per_pix = mid + 0.5 * half * np.sin(
        2 * np.pi * 200e3 * (rows_t[:, None] + timing.column_offset_s[None, :]))
    t0 = time.perf_counter()
    mod = FrameEngine(spec, modulated=["knee_current"], **engine_kw)
    res["night_knee_2d_table_build_s"] = round(time.perf_counter() - t0, 2)
    res["night_knee_2d_table_shape"] = list(mod.runs[0][0].table.values.shape)
    res["night_knee_2d_table_bound_mv"] = round(mod.worst_table_err_v * 1e3, 4)
    static = FrameEngine(spec, **engine_kw)
    res["engine_night_knee_static"] = timed(lambda: static.process(planes, out=out), repeat)
    res["engine_night_knee_per_line"] = timed(lambda: mod.process(
        planes, controls={"knee_current": per_row}, out=out), repeat)
    res["engine_night_knee_per_pixel"] = timed(lambda: mod.process(
        planes, controls={"knee_current": per_pix}, out=out), repeat)
    flows = {}
    for rate in ("line", "pixel"):
        ctl = bind_controls(spec, ["knee_current=lfo:sine:1kHz:0.5V"])
        ctl = [(dataclasses.replace(cs, rate=rate), cmap) for cs, cmap in ctl]
        flows[rate] = FrameFlow(spec, width=W, height=H, fps=30.0, clip_matrix="bt709",
                                controls=ctl)
        res[f"control_values_per_{rate}"] = timed(
            lambda f=flows[rate]: f.control_values(index), repeat)
        res[f"frameflow_night_knee_per_{rate}"] = timed(
            lambda f=flows[rate]: f.process(rgb, index), repeat)
    s = res["engine_night_knee_static"]["median_ms"]
    res["ratio_per_line_vs_static_engine"] = round(
        res["engine_night_knee_per_line"]["median_ms"] / s, 3)
    res["ratio_per_pixel_vs_static_engine"] = round(
        res["engine_night_knee_per_pixel"]["median_ms"] / s, 3)
    f_static = res["frameflow_static_night_knee"]["median_ms"]
    res["ratio_per_line_vs_static_frameflow"] = round(
        res["frameflow_night_knee_per_line"]["median_ms"] / f_static, 3)
    res["modulation_goal_ratio"] = MODULATION_GOAL
    res["per_line_meets_goal_engine"] = res["ratio_per_line_vs_static_engine"] <= MODULATION_GOAL
    return res


def render_figures(tmp: Path) -> dict:
    from livecurve.media.encode import ClipWriter
    from livecurve.outputs.render import render
    clip = str(demo_clip())
    res: dict = {}
    # decode → encode ceiling: the same decoder and encoder settings, no processing
    out = tmp / "ceiling.mp4"
    t0 = time.perf_counter()
    n = 0
    with open_source(clip) as src:
        info = src.info
        with ClipWriter(out, width=info.width, height=info.height, fps=info.fps,
                        codec="h264", audio_from=clip, matrix="bt709", force=True) as w:
            for fr in src:
                w.write(fr.rgb)
                n += 1
    el = time.perf_counter() - t0
    res["decode_encode_ceiling"] = {"frames": n, "seconds": round(el, 2),
                                    "fps": round(n / el, 2)}
    t0 = time.perf_counter()
    with open_source(clip) as src:
        n = sum(1 for _ in src)
    el = time.perf_counter() - t0
    res["decode_only"] = {"frames": n, "seconds": round(el, 2), "fps": round(n / el, 2)}
    for name in DEMO_CHAINS:
        spec = load_chain(chain_path(name))
        load0 = os.getloadavg()[0]
        t0 = time.perf_counter()
        rep = render(spec, clip, tmp / f"{name}.mp4", force=True, progress=False)
        el = time.perf_counter() - t0
        res[f"render_{name}"] = {
            "frames": rep.frames, "seconds_total": round(el, 2),
            "fps_total": round(rep.frames / el, 2),
            "fps_frame_loop": round(rep.fps, 2),
            "controls": [cs.name + "=" + str(cs.source) for cs in spec.controls.values()
                         if cs.source],
            "load_average_1min_before": round(load0, 2)}
    return res


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--out", default=str(Path(__file__).with_name("video.json")))
    ap.add_argument("--no-render", action="store_true", help="skip the render figures")
    args = ap.parse_args(argv)
    numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))

    load_before = os.getloadavg()
    frame = frame_figures(args.repeat)
    load_mid = os.getloadavg()
    render_res = None
    if not args.no_render:
        with tempfile.TemporaryDirectory(prefix="livecurve-bench-") as d:
            render_res = render_figures(Path(d))
    load_after = os.getloadavg()

    doc = {
        "what": "ms per 1920x1080 frame for each step of the video path (wall time, best and "
                "median of repeats, one run), and render speed of the 1280x720 demo clip",
        "note": "measured on a shared 2-core machine: other jobs may have run at the same "
                "time (see the load averages); compare figures within one run, not across "
                "runs",
        "frame": "demo clip frame 60 scaled to 1920x1080 (bicubic), 8-bit R'G'B', BT.709",
        "repeat": args.repeat,
        **runtime_info(),
        "load_average_before": [round(v, 2) for v in load_before],
        "load_average_after_frames": [round(v, 2) for v in load_mid],
        "load_average_after": [round(v, 2) for v in load_after],
        "per_frame_1080p": frame,
        "render_720p_h264": render_res,
    }
    out = Path(args.out)
    with atomic_output(out, force=True) as tmp:  # written whole or not at all
        tmp.write_text(json.dumps(doc, indent=2) + "\n")
    print(json.dumps(doc, indent=2))
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
