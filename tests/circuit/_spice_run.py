"""Run ngspice (Debian package ``ngspice``, version 39 here) in batch mode and read its
``wrdata`` output back, for the reference checks of the circuit core.

ngspice is the outside reference: every helper here only writes the deck, runs
``ngspice -b`` and parses what it wrote; nothing of livecurve's solver is used.
"""

from __future__ import annotations

import subprocess
from pathlib import Path

import numpy as np

from livecurve.circuit.spice import chain_deck, read_wrdata, stage_deck

#: Largest |livecurve − ngspice| allowed on any DC sweep point, volts.  The issue's bound is
#: 0.5 mV and its aim 0.1 mV; we hold the aim (measured here: below 1 µV on every stage kind).
SPICE_TOL_V = 0.1e-3


def run_ngspice(ngspice: str, deck_text: str, deck_path: Path, *, timeout_s: float = 120.0):
    """Write *deck_text* to *deck_path* and run ``ngspice -b`` on it.

    Returns the completed process; fails the calling test if ngspice exits non-zero or
    prints an error line.
    """
    deck_path.write_text(deck_text)
    proc = subprocess.run([ngspice, "-b", str(deck_path)], capture_output=True, text=True,
                          timeout=timeout_s, cwd=deck_path.parent)
    text = proc.stdout + proc.stderr
    assert proc.returncode == 0, f"ngspice exited {proc.returncode}:\n{text[-2000:]}"
    bad = [ln for ln in text.splitlines() if ln.lower().lstrip().startswith("error")]
    assert not bad, "ngspice reported errors:\n" + "\n".join(bad)
    return proc


def ngspice_stage_sweep(ngspice: str, net, vin_v: np.ndarray, t_kelvin: float,
                        workdir: Path, tag: str = "stage") -> np.ndarray:
    """v(out) of one stage netlist from ngspice at each point of the uniform sweep *vin_v*."""
    data = workdir / f"{tag}.dat"
    run_ngspice(ngspice, stage_deck(net, vin_v, t_kelvin=t_kelvin, data_file=str(data)),
                workdir / f"{tag}.cir")
    cols = read_wrdata(str(data))
    assert cols.shape[0] == len(vin_v), (cols.shape, len(vin_v))
    np.testing.assert_allclose(cols[:, 0], vin_v, atol=1e-9)
    return cols[:, 1]


def ngspice_chain_sweep(ngspice: str, model, points: int, t_kelvin: float | None,
                        workdir: Path, tag: str = "chain", live: dict | None = None):
    """(input volts (N,), outputs (3, N)) of a whole chain from ngspice."""
    data = workdir / f"{tag}.dat"
    run_ngspice(ngspice, chain_deck(model, t_kelvin=t_kelvin, points=points, live=live,
                                    data_file=str(data)), workdir / f"{tag}.cir")
    cols = read_wrdata(str(data))
    assert cols.shape == (points, 4), cols.shape
    return cols[:, 0], cols[:, 1:].T
