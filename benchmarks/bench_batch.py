"""Batch rendering on Dask on this machine → benchmarks/batch.json.

* Items per minute: a grid of one clip through film_shoulder at four ``contrast`` settings
  (four items, h264), on an in-process local cluster of 1 and then 2 worker processes.  The
  wall time is what ``livecurve batch`` takes from the call to the index: cluster start,
  every render (each builds its tables), the index and the contact sheet.
* A long clip split vs whole: one clip rendered by ``render()`` in this process, and the
  same clip as one batch item cut into segments on 2 workers and joined by stream copy.

The clips are drawn by the bundled ffmpeg (testsrc2 pattern with a sine tone).  Run:
``python3 benchmarks/bench_batch.py [--size 320x180] [--seconds 4] [--long-seconds 16]``.
The machine is shared and figures move by tens of percent between runs; the JSON records
the 1-minute load average before and after each measurement.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from _machine import runtime_info  # noqa: E402


def _clip(path: Path, size: str, seconds: float) -> str:
    from livecurve.media import _ffmpeg
    res = _ffmpeg.run(["-v", "error", "-y", "-f", "lavfi", "-i",
                       f"testsrc2=size={size}:rate=25:duration={seconds}", "-f", "lavfi",
                       "-i", f"sine=frequency=440:sample_rate=48000:duration={seconds + 0.5}",
                       "-c:v", "libx264", "-pix_fmt", "yuv420p", "-c:a", "aac",
                       "-t", str(seconds), str(path)])
    if res.returncode != 0:
        raise SystemExit(res.stderr.decode())
    return str(path)


def _load() -> float:
    return os.getloadavg()[0]


def _batch(chain, source, out, *, workers, sets=(), segment_s=None) -> dict:
    from livecurve.outputs.batch import plan_batch
    from livecurve.outputs.batchrun import run_batch
    load0 = _load()
    t0 = time.perf_counter()
    items, specs = plan_batch([chain], [source], sets=sets, segment_s=segment_s)
    rep = run_batch(items, specs, out, progress=False, n_workers=workers)
    wall = time.perf_counter() - t0
    assert rep.failed == 0, rep.lines()
    workers_used = {w for r in rep.rows for w in r["worker"].split()}
    return {"items": len(items), "workers": workers, "workers_used": len(workers_used),
            "wall_s": wall, "items_per_minute": 60.0 * len(items) / wall,
            "frames": sum(int(r["frames"]) for r in rep.rows),
            "segments": sum(int(r["segments"]) for r in rep.rows),
            "load_1min_before": load0, "load_1min_after": _load()}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", default="320x180")
    ap.add_argument("--seconds", type=float, default=4.0)
    ap.add_argument("--long-seconds", type=float, default=16.0)
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "batch.json"))
    a = ap.parse_args(argv)
    from livecurve.config.chainfile import load_chain
    from livecurve.outputs.demo import chain_path
    from livecurve.outputs.render import render
    chain = str(chain_path("film_shoulder"))
    sets = ["contrast=15k,22k,33k,40k"]
    result = {"machine": runtime_info(), "size": a.size, "fps": 25,
              "chain": "film_shoulder", "codec": "h264"}
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        clip = _clip(d / "clip.mp4", a.size, a.seconds)
        long = _clip(d / "long.mp4", a.size, a.long_seconds)
        # warm the numba cache on disk so neither run pays for compiling
        render(load_chain(chain), clip, d / "warm.mp4", progress=False, duration_s=0.2)
        grid = {}
        for n in (1, 2):
            grid[f"{n}_worker"] = _batch(chain, clip, d / f"grid{n}", workers=n, sets=sets)
            print(f"{n} worker(s): {grid[f'{n}_worker']['items_per_minute']:.1f} items/min",
                  file=sys.stderr)
        result["grid"] = {"clip_seconds": a.seconds, **grid}
        load0 = _load()
        t0 = time.perf_counter()
        rep = render(load_chain(chain), long, d / "whole.mp4", progress=False)
        whole = {"wall_s": time.perf_counter() - t0, "frames": rep.frames,
                 "load_1min_before": load0, "load_1min_after": _load()}
        split = _batch(chain, long, d / "split", workers=2, segment_s=a.long_seconds / 4)
        result["long_clip"] = {"clip_seconds": a.long_seconds, "whole_in_process": whole,
                               "split_2_workers": split,
                               "split_over_whole": split["wall_s"] / whole["wall_s"]}
        print(f"long clip: whole {whole['wall_s']:.1f} s, split on 2 workers "
              f"{split['wall_s']:.1f} s", file=sys.stderr)
    Path(a.out).write_text(json.dumps(result, indent=1) + "\n")
    print(f"wrote {a.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
