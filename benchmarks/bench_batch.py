"""Batch rendering on Dask on this machine → benchmarks/batch.json.

* Items per minute: a grid of one clip through film_shoulder at four ``contrast`` settings
  (four items, h264), with 1 and then 2 worker processes, two ways:

  - ``cold``: the embedded default, timed from the call to the index, so it includes
    starting the local cluster and each worker's first import of livecurve and load of the
    compiled numba kernels, as one ``livecurve batch`` command pays them;
  - ``warm``: on a local cluster started (``warm_up_s``) and warmed with one tiny render per
    worker beforehand, so the figure is the rendering alone (each item still builds its own
    tables).
* A long clip split vs whole: one clip rendered by ``render()`` in this (warm) process, and
  the same clip as one batch item cut into four segments on a warm 2-worker cluster and
  joined by stream copy.

The clips are drawn by the bundled ffmpeg (testsrc2 pattern with a sine tone).  Run:
``python3 benchmarks/bench_batch.py [--size 320x180] [--seconds 3] [--long-seconds 12]``.
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


def _warm_task(chain, clip, out):
    from livecurve.config.chainfile import load_chain
    from livecurve.outputs.render import render
    render(load_chain(chain), clip, f"{out}_{os.getpid()}.mp4", progress=False, duration_s=0.2,
           force=True)
    return True


class _WarmCluster:
    """A local cluster of *n* single-threaded workers, each warmed by one tiny render."""

    def __init__(self, n: int, chain: str, clip: str, folder: Path):
        from distributed import Client, LocalCluster

        from livecurve.outputs.cluster import cores
        t0 = time.perf_counter()
        self.cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                    host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                    env={"NUMBA_NUM_THREADS": str(max(1, cores() // n))})
        self.client = Client(self.cluster, set_as_default=False)
        self.client.run(_warm_task, chain, clip, str(folder / f"warm{n}"))
        self.warm_up_s = time.perf_counter() - t0

    def close(self):
        self.client.close()
        self.cluster.close()


def _batch(chain, source, out, *, workers, sets=(), segment_s=None, scheduler=None) -> dict:
    from livecurve.outputs.batch import plan_batch
    from livecurve.outputs.batchrun import run_batch
    load0 = _load()
    t0 = time.perf_counter()
    items, specs = plan_batch([chain], [source], sets=sets, segment_s=segment_s)
    rep = run_batch(items, specs, out, progress=False, n_workers=workers,
                    scheduler=scheduler)
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
    ap.add_argument("--seconds", type=float, default=3.0)
    ap.add_argument("--long-seconds", type=float, default=12.0)
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
            cold = _batch(chain, clip, d / f"cold{n}", workers=n, sets=sets)
            wc = _WarmCluster(n, chain, clip, d)
            try:
                warm = _batch(chain, clip, d / f"warm{n}", workers=n, sets=sets,
                              scheduler=wc.cluster.scheduler_address)
                warm["warm_up_s"] = wc.warm_up_s
                if n == 2:
                    split = _batch(chain, long, d / "split", workers=2,
                                   segment_s=a.long_seconds / 4,
                                   scheduler=wc.cluster.scheduler_address)
            finally:
                wc.close()
            grid[f"{n}_worker"] = {"cold": cold, "warm": warm}
            print(f"{n} worker(s): {cold['items_per_minute']:.1f} items/min cold, "
                  f"{warm['items_per_minute']:.1f} warm", file=sys.stderr)
        result["grid"] = {"clip_seconds": a.seconds, **grid}
        load0 = _load()
        t0 = time.perf_counter()
        rep = render(load_chain(chain), long, d / "whole.mp4", progress=False)
        whole = {"wall_s": time.perf_counter() - t0, "frames": rep.frames,
                 "load_1min_before": load0, "load_1min_after": _load()}
        result["long_clip"] = {"clip_seconds": a.long_seconds, "whole_in_process": whole,
                               "split_2_workers_warm": split,
                               "split_over_whole": split["wall_s"] / whole["wall_s"]}
        print(f"long clip: whole {whole['wall_s']:.1f} s, split on 2 workers "
              f"{split['wall_s']:.1f} s", file=sys.stderr)
    Path(a.out).write_text(json.dumps(result, indent=1) + "\n")
    print(f"wrote {a.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
