"""Circuit core figures: table builds against ngspice, and per-pixel table throughput;
write benchmarks/core.json.

Not a test: times depend on the machine and on what else runs on it, so the JSON records
the load average before and after.  Run from the repository root:

    python3 benchmarks/bench_core.py [--repeat 15] [--out benchmarks/core.json]

For each demo chain in configs/:

* ``build_s`` — FrameEngine table build (all channels), warm: built twice, the second
  timed (numba kernels compiled or loaded from cache by the first); ``build_best_of_3_s``
  is the best of that and two more builds (less sensitive to other load), and
  ``tables_only_best_s`` the DC tables alone, rebuilt with the public builders (the
  FrameEngine build also discretises each stage's line filter).
* ``ngspice`` — ngspice 39 (Debian package) on the chain's own deck
  (``livecurve.circuit.spice.chain_deck``) over the same number of DC points as the
  busiest channel's table build spent on solver evaluations (grid + check points; the deck
  solves all three channels at each point, so it does at least that much work).  Timed
  end to end (process start to exit) and as ngspice reports its own analysis time.
* accuracy — the tables' measured bound next to the solver's and the tables' largest
  |Δ| against ngspice over that sweep (DC path: each channel's runs' tables in order).
* the same build with each live knob modulated (2-D tables).

Throughput: each chain's tables applied to a 1920×1080×3 float32 frame (planar), 1-D
with the knobs fixed and 2-D with one control value per row (a line-rate ramp).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numba
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from livecurve.circuit.spice import chain_deck, read_wrdata  # noqa: E402
from livecurve.config.chainfile import load_chain  # noqa: E402
from livecurve.engine.pipeline import FrameEngine  # noqa: E402
from livecurve.engine.tables import (  # noqa: E402
    TARGET_ERR_V,
    apply_table,
    build_table_1d,
    build_table_2d,
)
from livecurve.media.atomic import atomic_output  # noqa: E402

H, W = 1080, 1920


def _build(spec, extra: int = 2, **kw):
    """(engine, second build's seconds, best of that and *extra* more builds' seconds)."""
    FrameEngine(spec, **kw)  # warm: kernels compiled / cached, solver warm
    ts = []
    for _ in range(1 + extra):
        t0 = time.perf_counter()
        eng = FrameEngine(spec, **kw)
        ts.append(time.perf_counter() - t0)
    return eng, ts[0], min(ts)


def _tables_only(eng, repeat: int = 3) -> float:
    """Best time (s) to rebuild just the engine's tables with the public builders, warm.

    The FrameEngine build also discretises each stage's line filter; this isolates the DC
    part: the solver sweeps and the error checks.
    """
    model = eng.model
    best = float("inf")
    for _ in range(repeat + 1):
        t0 = time.perf_counter()
        for ch in range(3):
            for run in eng.runs[ch]:
                if run.knob is None:
                    build_table_1d(lambda v, ch=ch, run=run: model.transfer(
                        ch, v, stages=run.stages, live=eng.state.live), run.lo_v, run.hi_v)
                else:
                    ls = eng.spec.live[run.knob]
                    build_table_2d(lambda v, c, ch=ch, run=run: model.transfer(
                        ch, v, stages=run.stages, live={**eng.state.live, run.knob: c}),
                        run.lo_v, run.hi_v, ls.lo, ls.hi)
        best = min(best, time.perf_counter() - t0)
    return best


def _solves_per_channel(eng) -> list[int]:
    return [sum(r.table.n_solves for r in eng.runs[ch]) for ch in range(3)]


def _ngspice(exe, model, points, workdir: Path) -> dict:
    data = workdir / "bench.dat"
    deck = workdir / "bench.cir"
    text = chain_deck(model, points=points, data_file=str(data))
    assert "\nquit\n" in text
    # `rusage all` makes ngspice print its own analysis time and Newton iteration count
    deck.write_text(text.replace("\nquit\n", "\nrusage all\nquit\n"))
    t0 = time.perf_counter()
    proc = subprocess.run([exe, "-b", str(deck)], capture_output=True, text=True, timeout=600)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"ngspice failed:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}")
    text = proc.stdout + proc.stderr
    own = {}
    for label, key in (("Total analysis time", "analysis_s"),
                       ("Total elapsed time", "elapsed_s")):
        m = re.search(rf"{label} \(seconds\) = ([0-9.eE+-]+)", text)
        own[key] = float(m.group(1)) if m else None
    m = re.search(r"Total iterations = (\d+)", text)
    own["newton_iterations"] = int(m.group(1)) if m else None
    cols = read_wrdata(str(data))
    return {"points": points, "wall_s": wall, **own, "vin": cols[:, 0], "out": cols[:, 1:].T}


def _tables_dc(eng, vin: np.ndarray) -> np.ndarray:
    """Each channel's runs' tables applied in order to the sweep (no line filters)."""
    out = np.empty((3, vin.size))
    for ch in range(3):
        v = vin.astype(np.float32)[None, :]
        for run in eng.runs[ch]:
            ctl = eng.state.live.get(run.knob) if run.knob else None
            v = apply_table(np.ascontiguousarray(v), run.table, control=ctl)
        out[ch] = v[0]
    return out


def _throughput(eng, frame, repeat, control_rows=None) -> dict:
    """Msamples/s of the table kernels over a (3, H, W) frame."""
    out = np.empty_like(frame)
    jobs = []
    for ch in range(3):
        for run in eng.runs[ch]:
            ctl = None
            if run.knob is not None:
                ls = eng.spec.live[run.knob]
                # control_rows: 0…1 per row, mapped onto the knob's range (a line-rate ramp)
                ctl = ls.value if control_rows is None else ls.lo + (ls.hi - ls.lo) * control_rows
            jobs.append((ch, run.table, ctl))
            break  # the first run of each channel: one table pass per plane

    def once():
        for ch, table, ctl in jobs:
            apply_table(frame[ch], table, control=ctl, out=out[ch])

    once()
    ts = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        once()
        ts.append(time.perf_counter() - t0)
    samples = H * W * len(jobs)
    med = float(np.median(ts))
    return {"planes": len(jobs), "median_ms": 1e3 * med, "best_ms": 1e3 * min(ts),
            "msamples_per_s": samples / med / 1e6, "table_shapes": [list(j[1].values.shape)
                                                                    for j in jobs]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "core.json"))
    args = ap.parse_args(argv)
    exe = shutil.which("ngspice")
    if exe is None:
        print("ngspice not found (Debian package 'ngspice')", file=sys.stderr)
        return 2
    ver = subprocess.run([exe, "-v"], capture_output=True, text=True).stdout
    load0 = os.getloadavg()
    rng = np.random.default_rng(3)
    frame = rng.uniform(-0.35, 0.35, (3, H, W)).astype(np.float32)
    ramp = np.linspace(0.0, 1.0, H)
    chains = []
    with tempfile.TemporaryDirectory() as tmp:
        for path in sorted((ROOT / "configs").glob("*.toml")):
            spec = load_chain(path)
            eng, build_s, build_best_s = _build(spec)
            per_ch = _solves_per_channel(eng)
            n = max(per_ch)
            ng = _ngspice(exe, eng.model, n, Path(tmp))
            solver = eng.model.transfer_all(ng["vin"])
            tab = _tables_dc(eng, ng["vin"])
            shaped = [ch for ch in range(3) if eng.runs[ch]]
            entry = {
                "chain": path.name, "title": spec.title,
                "build_s": build_s, "build_best_of_3_s": build_best_s,
                "tables_only_best_s": (tables_s := _tables_only(eng)),
                "tables": [{"channel": r["channel"], "stages": r["stages"],
                            "shape": list(r["table_n"]), "bound_mV": 1e3 * r["err_v"],
                            "n_solves": next(x.table.n_solves for x in eng.runs[r["channel"]]
                                             if [s.id for s in x.stages] == r["stages"])}
                           for r in eng.summary_rows()],
                "solves_per_channel": per_ch,
                "ngspice": {k: v for k, v in ng.items() if k not in ("vin", "out")},
                "ngspice_over_build": ng["wall_s"] / build_s,
                "ngspice_wall_over_tables_only": ng["wall_s"] / tables_s,
                "ngspice_analysis_over_tables_only": (ng["analysis_s"] or float("nan"))
                / tables_s,
                "table_bound_mV": 1e3 * eng.worst_table_err_v,
                "target_mV": 1e3 * TARGET_ERR_V,
                "solver_vs_ngspice_max_mV": 1e3 * float(np.max(np.abs(solver - ng["out"])[shaped])),
                "tables_vs_ngspice_max_mV": 1e3 * float(np.max(np.abs(tab - ng["out"])[shaped])),
                "throughput_1d": _throughput(eng, frame, args.repeat),
                "modulated": [],
            }
            for knob in spec.live:
                meng, mb, mb_best = _build(spec, modulated=[knob])
                entry["modulated"].append({
                    "knob": knob, "build_s": mb, "build_best_of_3_s": mb_best,
                    "tables_only_best_s": _tables_only(meng, repeat=1),
                    "table_bound_mV": 1e3 * meng.worst_table_err_v,
                    "shapes": [list(r["table_n"]) for r in meng.summary_rows() if r["knob"]],
                    "throughput_2d_per_row": _throughput(meng, frame, args.repeat,
                                                         control_rows=ramp)})
            chains.append(entry)
            print(f"{path.stem}: build {build_s * 1e3:.1f} ms (best {build_best_s * 1e3:.1f} ms, "
                  f"tables alone {tables_s * 1e3:.1f} ms; {n} points/channel), ngspice "
                  f"{ng['wall_s'] * 1e3:.1f} ms wall / {ng['analysis_s']} s analysis; bound "
                  f"{entry['table_bound_mV']:.4f} mV, solver-ngspice "
                  f"{entry['solver_vs_ngspice_max_mV']:.5f} mV, tables-ngspice "
                  f"{entry['tables_vs_ngspice_max_mV']:.4f} mV; 1-D "
                  f"{entry['throughput_1d']['msamples_per_s']:.0f} Msamples/s")
            for m in entry["modulated"]:
                print(f"    {m['knob']}: 2-D build {m['build_s'] * 1e3:.1f} ms (best "
                      f"{m['build_best_of_3_s'] * 1e3:.1f} ms, tables alone "
                      f"{m['tables_only_best_s'] * 1e3:.1f} ms), bound "
                      f"{m['table_bound_mV']:.4f} mV, per-row "
                      f"{m['throughput_2d_per_row']['msamples_per_s']:.0f} Msamples/s")
    result = {
        "what": "circuit core: table builds vs ngspice, table throughput",
        "machine": {"cpus": os.cpu_count(), "numba_threads": numba.config.NUMBA_NUM_THREADS,
                    "python": platform.python_version(), "numba": numba.__version__,
                    "ngspice": ver.split("\n")[1].strip("* ").strip() if "\n" in ver else ver,
                    "load_before": load0, "load_after": os.getloadavg()},
        "frame": [3, H, W], "repeat": args.repeat, "chains": chains,
    }
    with atomic_output(args.out, force=True) as tmp:
        tmp.write_text(json.dumps(result, indent=2) + "\n")
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
