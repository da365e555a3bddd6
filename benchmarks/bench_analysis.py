"""Design-analysis figures on this machine → benchmarks/analysis.json.

For each demo chain:

* Monte Carlo: milliseconds per trial (one board = three channels' curves over the sweep and
  a grey ramp), the trials loop alone; the number of perturbed parts.
* Drift: milliseconds for ``FrameEngine.set_temperature`` (every table rebuilt), median of
  several temperatures; and for one ``TableFollower.maybe_update`` call that does not rebuild.
* CLF export: seconds for ``write_clf`` in its default (exact separable) form, its size and
  measured interpolation error; the same for the 33³ and 65³ LUT3D forms, for comparison.

Run: ``python3 benchmarks/bench_analysis.py [--trials N] [--out PATH]``.  Wall-clock figures
vary between runs by some tens of percent; the JSON records the machine they came from.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

CHAINS = ("film_shoulder", "shadow_crush", "night_knee")


def bench_chain(name: str, trials: int) -> dict:
    from livecurve.analysis.spread import list_parts, monte_carlo
    from livecurve.circuit.thermal import TableFollower, ThermalModel
    from livecurve.config.chainfile import load_chain
    from livecurve.engine.pipeline import FrameEngine
    from livecurve.outputs.clf import write_clf

    spec = load_chain(ROOT / "configs" / f"{name}.toml")
    out: dict = {"chain": name, "space": spec.space}
    monte_carlo(spec, trials=3, seed=0, rank=False)  # warm caches
    res = monte_carlo(spec, trials=trials, seed=1, rank=False)
    out["monte_carlo"] = {"trials": trials, "parts": len(list_parts(spec)),
                          "sweep_points": int(res.vin.size),
                          "ramp_steps": int(res.ramp.size),
                          "ms_per_trial": 1e3 * res.loop_seconds / trials}
    eng = FrameEngine(spec)
    times = []
    for dk in (-20.0, -10.0, 5.0, 15.0, 25.0, 0.0):
        t0 = time.perf_counter()
        eng.set_temperature(spec.ambient_k + dk)
        times.append(time.perf_counter() - t0)
    follower = TableFollower(ThermalModel(spec))
    t0 = time.perf_counter()
    n = 200
    for _ in range(n):
        follower.maybe_update(eng, 0.0)
    out["drift"] = {"set_temperature_ms_median": 1e3 * statistics.median(times),
                    "set_temperature_ms_max": 1e3 * max(times),
                    "follower_check_ms": 1e3 * (time.perf_counter() - t0) / n,
                    "table_sizes": [r["table_n"] for r in eng.summary_rows()]}
    clf = {}
    with tempfile.TemporaryDirectory() as tmp:
        for form, size in (("auto", None), ("lut3d", 33), ("lut3d", 65)):
            kw = {"form": form} if size is None else {"form": form, "lut3d_size": size}
            path = Path(tmp) / f"{name}_{form}{size or ''}.clf"
            rep = write_clf(path, spec, **kw)
            clf[rep.form + (f"_{size}" if size else "")] = {
                "seconds": rep.seconds, "size": rep.size, "interp_err": rep.interp_err,
                "file_kib": os.path.getsize(path) / 1024}
    out["clf"] = clf
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=300)
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "analysis.json"))
    args = ap.parse_args(argv)
    import numba
    import numpy as np
    result = {"what": "design analysis: Monte Carlo, drift rebuilds, CLF export",
              "machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                          "numpy": np.__version__, "numba": numba.__version__,
                          "platform": platform.platform()},
              "chains": [bench_chain(n, args.trials) for n in CHAINS]}
    from livecurve.media.atomic import atomic_output
    with atomic_output(args.out, force=True) as tmp:
        tmp.write_text(json.dumps(result, indent=1) + "\n")
    for c in result["chains"]:
        mc, dr, clf = c["monte_carlo"], c["drift"], c["clf"]
        auto = next(v | {"form": k} for k, v in clf.items() if not k.startswith("lut3d"))
        print(f"{c['chain']:>14}: {mc['ms_per_trial']:.2f} ms/trial ({mc['parts']} parts); "
              f"rebuild {dr['set_temperature_ms_median']:.1f} ms; CLF {auto['form']} "
              f"{auto['size']} in {auto['seconds']:.2f} s, err {auto['interp_err']:.1e}; "
              f"LUT3D 33 err {clf['lut3d_33']['interp_err']:.1e}, 65 err "
              f"{clf['lut3d_65']['interp_err']:.1e}")
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
