"""Real time at HD, in one run on one clip → benchmarks/realtime.json.

Clip: 1920×1080, 30 frames/s, 10 s, ffmpeg's ``testsrc2`` pattern with moving grain
(``noise=alls=8:allf=t+u``) and a stereo 440 Hz tone (AAC), H.264 (x264 veryfast, crf 18),
made by the bundled ffmpeg in a temporary folder; two 720p clips (30 and 60 frames/s, 5 s)
the same way for the preview.

Measured, one after another:

* ``ceiling``: the bundled ffmpeg decoding the clip and encoding it with livecurve's encoder
  settings (libx264 veryfast, crf 18, yuv420p, audio copied), no processing.
* ``lut3d``: the same with ffmpeg's own 33³ ``lut3d`` filter (a tone curve on each channel),
  same encoder.
* ``render``: ``livecurve render`` (a separate process, as a user runs it) per demo chain;
  ``fps`` is frames / whole process wall time (start-up included), ``loop_fps`` the rate the
  render reports for its frame loop.  Peak and sampled resident memory of the process (from
  /proc, every 0.25 s) shows whether it stays flat.  ``render_rgb``: the R′G′B′ reference path
  (``planar=False``) for one chain, for comparison.
* ``preview``: ``livecurve preview --max-frames 300`` in a real window on Xvfb, every
  monitor on, at 1080p30, 720p30 and 720p60, per demo chain; the dropped share is
  ``dropped / (frames_shown + dropped)`` from the window's ``end`` line.
* ``decoders``: decoding the 1080p clip to Y′CbCr planes through the pipe against the
  ``av`` package (optional, ``pip install .[bench]``), CPU ms and wall fps per frame.
* ``knob_latency``: in-process, the preview's own parts (PreviewSession on the clip's
  planes, the Rebuilder worker): a knob is turned while frames keep being drawn; the time
  from the request to the end of the first frame drawn with the new tables, in frame
  periods at 30 frames/s.

The machine may be shared: compare ratios within one run.  Run:
``python3 benchmarks/bench_realtime.py [--out PATH] [--quick]``.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

CHAINS = ("film_shoulder", "night_knee", "shadow_crush")
ENCODE = ["-c:v", "libx264", "-preset", "veryfast", "-crf", "18", "-pix_fmt", "yuv420p"]


def ffmpeg() -> str:
    import imageio_ffmpeg
    return imageio_ffmpeg.get_ffmpeg_exe()


def make_clip(path: Path, w: int, h: int, fps: int, seconds: float) -> Path:
    subprocess.run([ffmpeg(), "-hide_banner", "-v", "error", "-y", "-f", "lavfi", "-i",
                    f"testsrc2=size={w}x{h}:rate={fps},noise=alls=8:allf=t+u,format=yuv420p",
                    "-f", "lavfi", "-i",
                    "sine=frequency=440:sample_rate=48000,aformat=channel_layouts=stereo",
                    "-t", str(seconds), *ENCODE, "-color_range", "tv", "-colorspace", "bt709",
                    "-color_primaries", "bt709", "-color_trc", "bt709", "-c:a", "aac",
                    "-shortest", str(path)], check=True)
    return path


def cube(path: Path, n: int = 33) -> Path:
    """A 33³ .cube file: the same soft S-curve on each channel."""
    import numpy as np
    g = np.linspace(0, 1, n)
    curve = 0.5 + 0.5 * np.tanh(3 * (g - 0.5)) / np.tanh(1.5)
    lines = [f"LUT_3D_SIZE {n}"]
    for b in curve:                      # red changes fastest (.cube order)
        for gg in curve:
            for r in curve:
                lines.append(f"{r:.6f} {gg:.6f} {b:.6f}")
    path.write_text("\n".join(lines) + "\n")
    return path


def timed(cmd, *, env=None, sample_rss=False) -> dict:
    """Run *cmd*; wall seconds, exit status, output, and the child's resident memory."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env,
                            text=True)
    rss: list[float] = []

    def watch():
        while proc.poll() is None:
            try:
                for line in Path(f"/proc/{proc.pid}/status").read_text().splitlines():
                    if line.startswith("VmRSS:"):
                        rss.append(int(line.split()[1]) / 1024.0)
            except OSError:
                pass
            time.sleep(0.25)

    th = threading.Thread(target=watch, daemon=True)
    if sample_rss:
        th.start()
    out, err = proc.communicate()
    wall = time.perf_counter() - t0
    if sample_rss:
        th.join(1.0)
    return {"wall_s": wall, "rc": proc.returncode, "stdout": out, "stderr": err,
            "rss_mb": rss}


def env_with_checkout(**extra) -> dict:
    e = dict(os.environ)
    e["PYTHONPATH"] = str(ROOT) + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    e.update(extra)
    return e


def cli(*args) -> list[str]:
    return [sys.executable, "-m", "livecurve.cli", *map(str, args)]


def bench_ffmpeg(clip: Path, tmp: Path, frames: int) -> dict:
    out = {}
    r = timed([ffmpeg(), "-hide_banner", "-v", "error", "-y", "-i", str(clip), *ENCODE,
               "-c:a", "copy", str(tmp / "ceiling.mp4")])
    out["ceiling"] = {"wall_s": r["wall_s"], "fps": frames / r["wall_s"], "rc": r["rc"]}
    lut = cube(tmp / "curve.cube")
    r = timed([ffmpeg(), "-hide_banner", "-v", "error", "-y", "-i", str(clip), "-vf",
               f"lut3d=file={lut}", *ENCODE, "-c:a", "copy", str(tmp / "lut3d.mp4")])
    out["lut3d"] = {"wall_s": r["wall_s"], "fps": frames / r["wall_s"], "rc": r["rc"]}
    return out


def bench_render(clip: Path, tmp: Path, frames: int, chains) -> dict:
    res = {}
    for name in chains:   # warm numba's cache first (a compile is paid once per install)
        timed(cli("render", "--chain", ROOT / "configs" / f"{name}.toml", clip,
                  tmp / f"w_{name}.mp4", "--force", "--quiet", "--duration", "0.3"),
              env=env_with_checkout())
    for name in chains:
        r = timed(cli("render", "--chain", ROOT / "configs" / f"{name}.toml", clip,
                      tmp / f"r_{name}.mp4", "--force", "--quiet"), env=env_with_checkout(),
                  sample_rss=True)
        m = re.search(r"\(([\d.]+) fps\)", r["stdout"] + r["stderr"])
        rss = r["rss_mb"]
        half = len(rss) // 2
        res[name] = {"wall_s": r["wall_s"], "fps": frames / r["wall_s"], "rc": r["rc"],
                     "loop_fps": float(m.group(1)) if m else None,
                     "peak_rss_mb": max(rss) if rss else None,
                     "rss_first_half_max_mb": max(rss[:half]) if half else None,
                     "rss_second_half_max_mb": max(rss[half:]) if half else None,
                     "error": r["stderr"][-400:] if r["rc"] else None}
    return res


def bench_render_rgb(clip: Path, tmp: Path, frames: int, name: str) -> dict:
    code = ("import sys, time; from livecurve.config.chainfile import load_chain;"
            "from livecurve.outputs.render import render;"
            f"r = render(load_chain({str(ROOT / 'configs' / (name + '.toml'))!r}), "
            f"{str(clip)!r}, {str(tmp / 'rgb.mp4')!r}, force=True, progress=False, "
            "planar=False); print(r.fps)")
    r = timed([sys.executable, "-c", code], env=env_with_checkout())
    loop = float(r["stdout"].strip().splitlines()[-1]) if r["rc"] == 0 else None
    return {"chain": name, "wall_s": r["wall_s"], "fps": frames / r["wall_s"],
            "loop_fps": loop, "rc": r["rc"]}


def start_xvfb():
    rfd, wfd = os.pipe()
    proc = subprocess.Popen(["Xvfb", "-displayfd", str(wfd), "-screen", "0", "1920x1200x24",
                             "-nolisten", "tcp"], pass_fds=(wfd,), stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    os.close(wfd)
    number = b""
    while not number.endswith(b"\n"):
        chunk = os.read(rfd, 16)
        if not chunk:
            break
        number += chunk
    os.close(rfd)
    return proc, ":" + number.decode().strip()


def bench_preview(clips: dict, chains, max_frames: int) -> dict:
    xvfb, display = start_xvfb()
    res = {}
    try:
        env = env_with_checkout(DISPLAY=display)
        env.pop("QT_QPA_PLATFORM", None)
        for name in chains:   # warm numba's cache first, as for the renders
            timed(cli("preview", "--chain", ROOT / "configs" / f"{name}.toml",
                      next(iter(clips.values())), "--max-frames", 10), env=env)
        for fmt, clip in clips.items():
            for name in chains:
                r = timed(cli("preview", "--chain", ROOT / "configs" / f"{name}.toml", clip,
                              "--max-frames", max_frames), env=env)
                end = None
                for line in r["stdout"].splitlines():
                    if line.startswith("preview ") and '"end"' in line:
                        end = json.loads(line[len("preview "):])
                row = {"rc": r["rc"], "wall_s": r["wall_s"]}
                if end:
                    shown, dropped = end["frames_shown"], end["dropped"]
                    row.update(frames_shown=shown, dropped=dropped,
                               dropped_share=dropped / max(shown + dropped, 1))
                else:
                    row["error"] = r["stderr"][-400:]
                res[f"{fmt}/{name}"] = row
    finally:
        xvfb.terminate()
        xvfb.wait(5)
    return res


def bench_knob_latency(clip: Path, chains, trials: int = 5) -> dict:
    import numba

    from livecurve.media.planes import PlaneClipSource
    from livecurve.media.probe import probe
    from livecurve.preview.keys import Rebuilder
    from livecurve.preview.window import KNOB_WAIT_S, PreviewSession
    info = probe(str(clip))
    period = 1.0 / info.fps
    threads = numba.get_num_threads()
    res = {}
    for name in chains:
        s = PreviewSession(ROOT / "configs" / f"{name}.toml", info)
        knob = next((n for n in s.spec.live if n not in s.flow.engine.modulated), None)
        if knob is None:
            continue
        rb = Rebuilder(s.build_flow, s.flow.engine)
        lat = []
        with PlaneClipSource(info, loop=True) as src:
            for _ in range(5):
                fr = next(src)
                s.render_planes(fr, fr.index, frame=fr.index)
            ls = s.spec.live[knob]
            for k in range(trials):
                value = ls.hi if k % 2 == 0 else ls.lo
                s.set_knob(knob, value)
                t0 = time.perf_counter()
                rb.want_knobs({knob: value})
                got = None
                while got is None:
                    fr = next(src)
                    if rb.busy:                # as the window does before a new frame
                        numba.set_num_threads(1)
                        rb.wait_knobs(KNOB_WAIT_S)
                    numba.set_num_threads(1 if rb.busy else threads)
                    try:
                        kind, obj, err = rb.results.get_nowait()
                        if obj is None:
                            raise RuntimeError(err)
                        s.flow.engine = obj
                        got = True
                    except Exception as exc:  # queue.Empty: keep drawing frames meanwhile
                        if type(exc).__name__ != "Empty":
                            raise
                    numba.set_num_threads(1 if (rb.busy and not got) else threads)
                    s.render_planes(fr, fr.index, frame=fr.index)
                lat.append(time.perf_counter() - t0)
        rb.close()
        numba.set_num_threads(threads)
        res[name] = {"knob": knob, "latency_ms": [x * 1e3 for x in lat],
                     "latency_periods_30fps": [x / period for x in lat],
                     "worst_periods": max(lat) / period}
    return res


def bench_decoders(clip: Path, frames: int = 120) -> dict:
    """Decoding to Y′CbCr planes: the bundled ffmpeg through a pipe (what livecurve uses)
    against the ``av`` package (FFmpeg's libraries in-process), CPU and wall per frame."""
    import resource

    from livecurve.media.planes import open_planes

    def cpu():
        a = resource.getrusage(resource.RUSAGE_SELF)
        b = resource.getrusage(resource.RUSAGE_CHILDREN)
        return a.ru_utime + a.ru_stime + b.ru_utime + b.ru_stime

    out = {}
    t, c, n = time.perf_counter(), cpu(), 0
    with open_planes(clip) as src:
        for _ in src:
            n += 1
            if n >= frames:
                break
    out["pipe"] = {"frames": n, "fps": n / (time.perf_counter() - t),
                   "cpu_ms_per_frame": 1e3 * (cpu() - c) / n}
    try:
        import av
    except ImportError:
        out["av"] = "not installed (pip install av)"
        return out
    t, c, n = time.perf_counter(), cpu(), 0
    with av.open(str(clip)) as f:
        st = f.streams.video[0]
        st.thread_type = "AUTO"
        for frame in f.decode(st):
            frame.to_ndarray(format="yuv420p")
            n += 1
            if n >= frames:
                break
    out["av"] = {"version": av.__version__, "frames": n,
                 "fps": n / (time.perf_counter() - t), "cpu_ms_per_frame": 1e3 * (cpu() - c) / n}
    return out


def load() -> list[float]:
    return list(os.getloadavg())


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--out", default=str(Path(__file__).with_name("realtime.json")))
    ap.add_argument("--quick", action="store_true", help="3 s clips, 90 preview frames")
    args = ap.parse_args()
    from benchmarks._machine import runtime_info
    secs = 3 if args.quick else 10
    max_frames = 90 if args.quick else 300
    report = {"machine": runtime_info(), "load_before": load(), "clip_seconds": secs}
    t_all = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="lc-rt-") as d:
        tmp = Path(d)
        clip = make_clip(tmp / "hd.mp4", 1920, 1080, 30, secs)
        c720 = make_clip(tmp / "hd720p30.mp4", 1280, 720, 30, min(secs, 5))
        c720_60 = make_clip(tmp / "hd720p60.mp4", 1280, 720, 60, min(secs, 5))
        frames = 30 * secs
        report["decoders"] = bench_decoders(clip)
        report["ffmpeg"] = bench_ffmpeg(clip, tmp, frames)
        report["load_after_ffmpeg"] = load()
        report["render"] = bench_render(clip, tmp, frames, CHAINS)
        report["render_rgb"] = bench_render_rgb(clip, tmp, frames, "shadow_crush")
        report["load_after_render"] = load()
        report["preview"] = bench_preview({"1080p30": clip, "720p30": c720,
                                           "720p60": c720_60}, CHAINS, max_frames)
        report["load_after_preview"] = load()
        report["knob_latency"] = bench_knob_latency(clip, CHAINS)
    ceil = report["ffmpeg"]["ceiling"]["fps"]
    lut = report["ffmpeg"]["lut3d"]["fps"]
    ratios = {}
    for name, r in report["render"].items():
        ratios[name] = {"vs_ceiling": r["fps"] / ceil, "vs_lut3d": r["fps"] / lut,
                        "loop_vs_ceiling": (r["loop_fps"] or 0) / ceil}
    report["ratios"] = ratios
    report["total_s"] = time.perf_counter() - t_all
    Path(args.out).write_text(json.dumps(report, indent=1) + "\n")
    print(f"ceiling {ceil:.1f} fps, lut3d {lut:.1f} fps")
    print(f"decoding to planes: {report['decoders']}")
    for name, r in report["render"].items():
        q = ratios[name]
        print(f"render {name}: {r['fps']:.1f} fps (loop {r['loop_fps']}) = "
              f"{q['vs_ceiling']:.2f}x ceiling, {q['vs_lut3d']:.2f}x lut3d, "
              f"peak {r['peak_rss_mb']} MB")
    rg = report["render_rgb"]
    print(f"render (R′G′B′ path) {rg['chain']}: {rg['fps']:.1f} fps, loop {rg['loop_fps']}")
    for key, r in report["preview"].items():
        share = r.get("dropped_share")
        print(f"preview {key}: " + (f"{100 * share:.1f} % dropped" if share is not None
                                     else f"failed: {r.get('error')}"))
    for name, r in report["knob_latency"].items():
        print(f"knob {name}.{r['knob']}: worst {r['worst_periods']:.2f} frame periods")
    print(f"total {report['total_s']:.0f} s; wrote {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
