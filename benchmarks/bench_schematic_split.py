"""How far the static/dynamic split of a nonlinear stage with a capacitor is from ngspice.

A transdiode log stage with a capacitor across its junction (our own values): the engine
runs the DC solver's static curve (tables) then the schematic's small-signal filter,
linearised at the blanking level (0 V on a Pb channel).  ngspice 39 (`ngspice -b`,
`.tran` with the tight options of REFERENCES.md) integrates the full nonlinear circuit,
the op-amp as a single-pole macro model (gm into R‖C, A0 = gm·R, GBW = gm/(2π·C)), with a
step at t = 0.  Reported: the worst error over the pixels after the step as a fraction of
the step, for a small and a large input step.  Writes ``schematic_split.json`` here.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

import numpy as np

from livecurve.config.chainfile import parse_chain
from livecurve.outputs.steps import step_responses

HERE = Path(__file__).resolve().parent
A0, GBW, GM = 2e5, 100e6, 1e-3
LINES = ["RIN in sum 10k", "IREF 0 sum 10u", "D1 sum out dj", "CF sum out 10p", "U1 0 sum out"]
STEPS_V = {"small": 0.0005, "medium": 0.005, "large": 0.5}


def _deck(v1: float, t_end: float, data: str) -> str:
    c = GM / (2 * math.pi * GBW)
    cards = [ln for ln in LINES if not ln.startswith("U")]
    return "\n".join(["* transdiode log stage with a capacitor across the junction",
                      f"VIN in 0 PWL(0 0 1e-15 {v1})", *cards,
                      ".model dj D(IS=1e-14 N=1)",
                      f"GU 0 un 0 sum {GM}", f"RU un 0 {A0 / GM}", f"CU un 0 {c:.15e}",
                      "EU out 0 un 0 1",
                      ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16", ".temp 27",
                      f".tran 1p {t_end:.6e} 0 20p", ".control", "set wr_singlescale",
                      "set wr_vecnames", "run", f"wrdata {data} v(out)", "quit", ".endc",
                      ".end", ""])


def main() -> dict:
    ngspice = shutil.which("ngspice")
    spec = parse_chain({"title": "log with C", "space": "ypbpr", "format": "1080p30",
                        "ambient": "27C", "opamp": {"a_ol": A0, "gbw": "100MHz"},
                        "sweep": {"from": "-0.05V", "to": "0.6V"},
                        "stage": [{"id": "logc", "kind": "netlist", "channels": [1],
                                   "elements": LINES,
                                   "models": {"dj": {"type": "diode", "is": "1e-14"}}}]})
    out = {"stage": LINES, "pixel_clock_hz": 74.25e6, "steps": {}}
    with tempfile.TemporaryDirectory() as tmp:
        for name, v1 in STEPS_V.items():
            t, y = step_responses(spec, samples=80, lead=10, from_v=0.0, to_v=v1)
            data = Path(tmp) / f"{name}.dat"
            cir = Path(tmp) / f"{name}.cir"
            cir.write_text(_deck(v1, t[-1] + 1e-9, str(data)))
            subprocess.run([ngspice, "-b", str(cir)], capture_output=True, check=True,
                           cwd=tmp, timeout=300)
            ref = np.loadtxt(data, skiprows=1)
            want = np.where(t <= 0, ref[0, 1], np.interp(t, ref[:, 0], ref[:, 1]))
            step = abs(ref[-1, 1] - ref[0, 1])
            err = np.abs(y[1] - want)
            after = t > 0
            out["steps"][name] = {
                "input_step_v": v1, "output_step_v": float(step),
                "worst_error_fraction_of_step": float(err[after].max() / step),
                "worst_error_at_ns": float(t[after][np.argmax(err[after])] * 1e9),
                "settled_error_v": float(err[-1])}
    # the derived filter along a 1080p plane (best of 5 after a warm-up run)
    from livecurve.engine.dynamics import apply_line_filter, discretise, stage_dynamics
    dyn = stage_dynamics(spec.stages[0], spec.opamp)
    lf = discretise(dyn, 1 / 74.25e6)
    plane = np.random.default_rng(0).uniform(-0.05, 0.6, (1080, 1920)).astype(np.float32)
    apply_line_filter(plane, lf, blank_level_v=0.0)
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        apply_line_filter(plane, lf, blank_level_v=0.0)
        times.append(time.perf_counter() - t0)
    out["filter"] = {"states": len(dyn.b), "blocks": lf.n_blocks,
                     "best_ms_per_1080p_plane": 1e3 * min(times),
                     "load_avg_1min": os.getloadavg()[0]}
    (HERE / "schematic_split.json").write_text(json.dumps(out, indent=2) + "\n")
    return out


if __name__ == "__main__":
    print(json.dumps(main(), indent=2))
