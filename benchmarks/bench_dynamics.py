"""Throughput of line-rate dynamics on 1080p planes; writes benchmarks/dynamics.json.

Run: ``python3 benchmarks/bench_dynamics.py [--repeat N] [--threads N [N ...]]`` (default:
one thread and all threads; both are recorded).

Times ``apply_line_filter`` on one 1920×1080 float32 plane and on a 3-plane frame
(three calls, one per channel) at the 1080p30 pixel clock (74.25 MHz, SMPTE
ST 274), for a stage with one, two and three kinds of dynamics (closed-loop
pole; + resonance; + slew limit), for the capacitive-load loop, and for chains
of one to three dynamic stages.  Two pictures: "bars" (full-scale vertical bars,
so slewing stages do slew at every bar edge, a 2 MHz sine band and a little
noise: ordinary content) and "sweep" (a full-amplitude horizontal frequency
sweep up to near the pixel clock's Nyquist frequency: a slewing stage changes
mode every few pixels, the worst case for the kernel).  Wall-clock figures on a
shared machine vary: the JSON records the load average before and after, the
median and the best of the repeats.
Goal: <= 8 ms per dynamic stage per 3-plane frame on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import sys
import time
from pathlib import Path

import numba
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from livecurve.engine.dynamics import StageDynamics, apply_line_filter, discretise  # noqa: E402
from livecurve.media.atomic import atomic_output  # noqa: E402

PIXEL_PERIOD_S = 1.0 / 74.25e6
H, W = 1080, 1920
BLANK_V = -0.35
GOAL_MS_PER_STAGE_FRAME = 8.0

POLE = {"gbw_hz": 50e6, "noise_gain": 3.0}
RES = {"f0_hz": 12e6, "zeta": 0.35}
SLEW = {"slew_v_per_us": 20.0}
CASES = {
    "1 kind: closed-loop pole (1 state)": StageDynamics(**POLE),
    "2 kinds: pole + resonance (3 states)": StageDynamics(**POLE, **RES),
    "3 kinds: pole + resonance + slew (3 states)": StageDynamics(**POLE, **RES, **SLEW),
    "pole + slew (1 state, exact)": StageDynamics(**POLE, **SLEW),
    "resonance only (2 states)": StageDynamics(**RES),
    "Ro·CL loop (2 states)": StageDynamics(**POLE, ro_ohm=50.0, cl_f=530e-12),
    "Ro·CL loop + slew (2 states)": StageDynamics(**POLE, **SLEW, ro_ohm=50.0, cl_f=530e-12),
}


def test_picture(kind: str, seed: int = 0) -> np.ndarray:
    """(3, H, W) float32 planes, zero-centred volts ("bars" or "sweep")."""
    rng = np.random.default_rng(seed)
    x = np.arange(W)
    planes = np.empty((3, H, W), np.float32)
    for c in range(3):
        if kind == "bars":
            bars = np.where((x // 240 + c) % 2 == 0, 0.35, -0.35)
            sine = 0.3 * np.sin(2 * np.pi * 2e6 * PIXEL_PERIOD_S * x)
            band = (np.arange(H) // 180) % 3 == 2
            img = np.where(band[:, None], sine[None, :], bars[None, :])
        else:
            img = np.broadcast_to(0.35 * np.sin(2 * np.pi * (x / W) ** 2 * 400), (H, W))
        planes[c] = np.clip(img + rng.normal(0, 0.005, (H, W)), -0.35, 0.35)
    return planes


def _time(fn, repeat: int) -> tuple[float, float]:
    fn()  # warm (compile or cache load)
    ts = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return statistics.median(ts) * 1e3, min(ts) * 1e3


def run(repeat: int, threads: int) -> dict:
    numba.set_num_threads(threads)
    out = np.empty((3, H, W), np.float32)
    results = {}
    for kind in ("bars", "sweep"):
        frame = test_picture(kind)
        for name, dyn in CASES.items():
            if kind == "sweep" and dyn.slew_v_per_us is None:
                continue    # linear stages cost the same on any picture
            lf = discretise(dyn, PIXEL_PERIOD_S)

            def one_plane(lf=lf, frame=frame):
                apply_line_filter(frame[0], lf, blank_level_v=BLANK_V, out=out[0])

            def one_frame(lf=lf, frame=frame):
                for c in range(3):
                    apply_line_filter(frame[c], lf, blank_level_v=BLANK_V, out=out[c])

            plane_med, plane_min = _time(one_plane, repeat)
            frame_med, frame_min = _time(one_frame, repeat)
            results[f"{name} [{kind}]"] = {
                "ms_per_plane_median": round(plane_med, 2),
                "ms_per_plane_best": round(plane_min, 2),
                "ms_per_frame_median": round(frame_med, 2),
                "ms_per_frame_best": round(frame_min, 2),
                "meets_goal_best": frame_min <= GOAL_MS_PER_STAGE_FRAME}
    chains = {}
    frame = test_picture("bars")
    stage = discretise(CASES["3 kinds: pole + resonance + slew (3 states)"], PIXEL_PERIOD_S)
    for n_stages in (1, 2, 3):
        def chain(n_stages=n_stages):
            for c in range(3):
                src = frame[c]
                for _ in range(n_stages):
                    apply_line_filter(src, stage, blank_level_v=BLANK_V, out=out[c])
                    src = out[c]

        med, best = _time(chain, repeat)
        chains[f"{n_stages} stage(s) of the 3-kind stage [bars]"] = {
            "ms_per_frame_median": round(med, 2), "ms_per_frame_best": round(best, 2),
            "ms_per_stage_frame_best": round(best / n_stages, 2)}
    return {"per_stage": results, "chains": chains}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--threads", type=int, nargs="+", default=None,
                    help="numba thread counts to time (default: 1 and all)")
    ap.add_argument("--out", type=Path, default=Path(__file__).with_name("dynamics.json"))
    args = ap.parse_args(argv)
    all_threads = numba.config.NUMBA_NUM_THREADS
    counts = args.threads or sorted({1, all_threads})
    load_before = os.getloadavg()
    body = {f"{n}_thread{'s' if n > 1 else ''}": run(args.repeat, n) for n in counts}
    report = {
        "what": "line-rate dynamics (livecurve.engine.dynamics), 1920x1080 float32 planes, "
                "74.25 MHz pixel clock; frame = 3 planes",
        "goal_ms_per_dynamic_stage_per_frame": GOAL_MS_PER_STAGE_FRAME,
        "machine": {"cpus": os.cpu_count(), "numba_threads_max": all_threads,
                    "python": platform.python_version(), "numba": numba.__version__,
                    "numpy": np.__version__, "processor": platform.processor() or
                    platform.machine(),
                    "load_average_before": [round(v, 2) for v in load_before],
                    "load_average_after": [round(v, 2) for v in os.getloadavg()]},
        "repeat": args.repeat,
        **body,
    }
    args.out.parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(args.out, force=True) as tmp:  # written whole or not at all
        tmp.write_text(json.dumps(report, indent=2) + "\n")
    print(json.dumps(report, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
