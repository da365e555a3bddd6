"""The command line's circuit verbs: ``curve`` (CSV and PNG), ``--temp-c``, ``--set`` and
``export --spice`` (the deck runs in ngspice 39 as written and agrees with ``curve``).

References: ngspice 39 (Debian package ``ngspice``) for the exported deck; the junction
temperature law of Berkeley SPICE's Gummel–Poon model (REFERENCES.md) and the ≈ −2 mV/K
drift of VBE at fixed current (common practice; Sedra & Smith) for ``--temp-c``.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import cv2
import numpy as np
import pytest
import scipy.constants

from livecurve.circuit.chain import ChainModel
from livecurve.cli import main
from livecurve.config.chainfile import load_chain
from tests.circuit._spice_run import SPICE_TOL_V, run_ngspice

ROOT = Path(__file__).resolve().parents[2]
KNEE = ROOT / "configs" / "night_knee.toml"
CONFIGS = sorted((ROOT / "configs").glob("*.toml"))
POINTS = 41


def _cli(*args):
    """Run ``python -m livecurve.cli`` in a subprocess (the real entry point)."""
    return subprocess.run([sys.executable, "-m", "livecurve.cli", *map(str, args)],
                          capture_output=True, text=True, cwd=ROOT, timeout=300)


def _read_csv(path):
    lines = Path(path).read_text().splitlines()
    return lines[0], np.loadtxt(lines[1:], delimiter=",", ndmin=2)


@pytest.fixture(scope="module")
def knee():
    spec = load_chain(KNEE)
    return spec, ChainModel(spec)


def _expected(model, points, **kw):
    vin = np.linspace(*model.spec.sweep_v, points)
    return vin, model.transfer_all(vin, **kw)


def test_curve_csv_subprocess(tmp_path, knee):
    spec, model = knee
    out = tmp_path / "curve.csv"
    proc = _cli("curve", KNEE, "--csv", out, "--points", POINTS)
    assert proc.returncode == 0, proc.stderr
    header, rows = _read_csv(out)
    assert header == "input_v,out0_v,out1_v,out2_v"
    vin, want = _expected(model, POINTS)
    assert rows.shape == (POINTS, 4)
    np.testing.assert_allclose(rows[:, 0], vin, atol=1e-9)
    np.testing.assert_allclose(rows[:, 1:].T, want, atol=1e-8)  # printed with 9 digits
    assert not list(tmp_path.glob(".*partial*"))  # no temporary file left behind


@pytest.mark.parametrize("config", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_curve_csv_every_demo(tmp_path, capsys, config):
    out = tmp_path / "c.csv"
    assert main(["curve", str(config), "--csv", str(out), "--points", "21"]) == 0
    header, rows = _read_csv(out)
    assert header == "input_v,out0_v,out1_v,out2_v"
    vin, want = _expected(ChainModel(load_chain(config)), 21)
    np.testing.assert_allclose(rows[:, 1:].T, want, atol=1e-8)


def test_curve_png_is_a_plot(tmp_path, capsys):
    out = tmp_path / "curve.png"
    assert main(["curve", str(CONFIGS[0]), "--png", str(out), "--points", "101"]) == 0
    img = cv2.imread(str(out), cv2.IMREAD_COLOR)
    assert img is not None and img.ndim == 3 and img.shape[0] >= 200 and img.shape[1] >= 300
    colours = np.unique(img.reshape(-1, 3), axis=0)
    assert len(colours) > 20  # background, grid, text and anti-aliased traces
    # the background is the most common colour; a good share of pixels differ from it
    flat = img.reshape(-1, 3)
    vals, counts = np.unique(flat, axis=0, return_counts=True)
    background = vals[np.argmax(counts)]
    differs = np.any(flat != background, axis=1).mean()
    assert 0.01 < differs < 0.6


def test_curve_temp_c_moves_log_chain_the_right_way(tmp_path, capsys, knee):
    spec, model = knee
    base, hot = tmp_path / "base.csv", tmp_path / "hot.csv"
    assert main(["curve", str(KNEE), "--csv", str(base), "--points", str(POINTS)]) == 0
    assert main(["curve", str(KNEE), "--csv", str(hot), "--points", str(POINTS),
                 "--temp-c", "50"]) == 0
    _, b = _read_csv(base)
    _, h = _read_csv(hot)
    np.testing.assert_array_equal(h[:, 2:], b[:, 2:])  # Pb, Pr have no stages
    np.testing.assert_allclose(h[:, 1:].T, model.transfer_all(b[:, 0], t_kelvin=323.15),
                               atol=1e-8)
    # Warmer junction at the same current: VBE falls (≈ −2 mV/K, Sedra & Smith, common
    # practice); the log stage's output (−VBE) rises and the inverting restore stage (gain
    # −20) turns that into a fall of the channel output.  The size is predicted without
    # livecurve's code: VBE = VT·ln(IC/IS(T)) with VT = kT/q from CODATA (scipy.constants)
    # and the SPICE Gummel–Poon law IS(T) = IS·exp[(T/Tnom − 1)·EG/VT + XTI·ln(T/Tnom)]
    # written out here (ngspice manual, BJT temperature effects; REFERENCES.md), with the
    # chain file's IS and the SPICE defaults EG = 1.11 eV, XTI = 3, Tnom = 27 °C.
    knee_stage, restore = spec.stage("knee"), spec.stage("restore")
    i_c = b[:, 0] / knee_stage.params["r_in"] + knee_stage.params["i_ref"]
    assert knee_stage.device.is_a == 2e-16  # night_knee.toml: is = "2e-16"
    is0, eg, xti, t_nom = 2e-16, 1.11, 3.0, 300.15

    def v_t(t):
        return scipy.constants.k * t / scipy.constants.e

    def vbe(t):
        is_t = is0 * np.exp((t / t_nom - 1) * eg / v_t(t) + xti * np.log(t / t_nom))
        return v_t(t) * np.log(i_c / is_t)

    t0, t1 = spec.ambient_k, 323.15
    d_vbe = vbe(t1) - vbe(t0)
    per_k = d_vbe / (t1 - t0)
    # The same law's derivative, dVBE/dT = (VBE − EG − XTI·VT)/T (the textbook form, e.g.
    # Gray & Meyer, from memory), at the mid temperature: the 20 K secant agrees to
    # 0.044 µV/K (measured); held at 0.2 µV/K.  Here, 25…95 µA into a 2e-16 A junction,
    # that is −1.64…−1.78 mV/K (measured): the rule of thumb's −1.8…−2.2 is for
    # junctions with VBE nearer 0.6 V, so it is not used as a bound.
    tm = 0.5 * (t0 + t1)
    np.testing.assert_allclose(per_k, (vbe(tm) - eg - xti * v_t(tm)) / tm, atol=0.2e-6, rtol=0)
    gain = restore.params["r_f"] / restore.params["r_in"]
    shift = h[:, 1] - b[:, 1]
    assert np.all(shift < 0)
    # measured |shift/(gain·ΔVBE) − 1| ≤ 1.14e-4 (the restore stage's finite loop gain,
    # 21/2e5 ≈ 1.05e-4, and CODATA 2018 against ngspice's 2014 constants); held at 3e-4
    np.testing.assert_allclose(shift, gain * d_vbe, rtol=3e-4)


def test_curve_set_knob(tmp_path, capsys, knee):
    spec, model = knee
    out = tmp_path / "set.csv"
    assert main(["curve", str(KNEE), "--csv", str(out), "--points", str(POINTS),
                 "--set", "knee_current=100uA", "--set", "black_trim=0.96"]) == 0
    _, rows = _read_csv(out)
    live = {"knee_current": 100e-6, "black_trim": 0.96}
    _, want = _expected(model, POINTS, live=live)
    np.testing.assert_allclose(rows[:, 1:].T, want, atol=1e-8)
    _, default = _expected(model, POINTS)
    assert np.max(np.abs(want[0] - default[0])) > 0.05  # the knob really moved the curve


@pytest.mark.parametrize("item, words", [
    ("knee_current=300uA", ["knee_current", "300uA"]),   # above its 200 µA maximum
    ("knee_current=10uA", ["knee_current", "10uA"]),     # below its minimum
    ("knee_current=1V", ["knee_current", "1V"]),         # wrong unit
    ("no_such_knob=1", ["no_such_knob", "knee_current"]),
    ("knee_current", ["NAME=VALUE"]),
])
def test_curve_set_refused(tmp_path, capsys, item, words):
    out = tmp_path / "never.csv"
    code = main(["curve", str(KNEE), "--csv", str(out), "--set", item])
    err = capsys.readouterr().err
    assert code != 0
    assert "Traceback" not in err
    for w in words:
        assert w in err, err
    assert not out.exists() and not list(tmp_path.iterdir())


def test_curve_set_refused_subprocess(tmp_path):
    proc = _cli("curve", KNEE, "--csv", tmp_path / "x.csv", "--set", "knee_current=300uA")
    assert proc.returncode != 0
    assert "Traceback" not in proc.stderr and "knee_current" in proc.stderr
    assert not (tmp_path / "x.csv").exists()


# ---- export --spice ------------------------------------------------------------------
def _with_wrdata(deck: str, data: Path) -> str:
    """The exported deck with a .control block that writes the three outputs."""
    lines = deck.rstrip().splitlines()
    assert lines[-1].strip().lower() == ".end"
    assert not any(ln.strip().lower() == ".control" for ln in lines)
    ctl = [".control", "set wr_singlescale", "set wr_vecnames", "run",
           f"wrdata {data} v(out0) v(out1) v(out2)", "quit", ".endc"]
    return "\n".join(lines[:-1] + ctl + [lines[-1]]) + "\n"


def _printed_table(proc) -> np.ndarray:
    """Rows 'index<TAB>v-sweep<TAB>v(out0)…' of ngspice's .print output, without the index."""
    rows = []
    for line in proc.stdout.splitlines():
        parts = line.split()
        if len(parts) == 5 and parts[0].isdigit():
            rows.append([float(p) for p in parts[1:]])
    return np.array(rows)


@pytest.mark.parametrize("extra", [[], ["--temp-c", "45", "--set", "knee_current=120uA"]],
                         ids=["default", "hot_and_knob"])
def test_export_spice_runs_in_ngspice_and_matches_curve(ngspice, tmp_path, extra):
    deck, csv = tmp_path / "chain.cir", tmp_path / "chain.csv"
    proc = _cli("export", KNEE, "--spice", deck, "--points", POINTS, *extra)
    assert proc.returncode == 0, proc.stderr
    # as written: ngspice -b runs it, exits 0, prints no error and prints the sweep table
    printed = _printed_table(run_ngspice(ngspice, deck.read_text(), tmp_path / "as_is.cir"))
    # the same deck with a wrdata block, against `livecurve curve --csv` at the same points
    data = tmp_path / "out.dat"
    run_ngspice(ngspice, _with_wrdata(deck.read_text(), data), tmp_path / "probe.cir")
    assert main(["curve", str(KNEE), "--csv", str(csv), "--points", str(POINTS), *extra]) == 0
    ref = np.loadtxt(data, skiprows=1, ndmin=2)
    _, rows = _read_csv(csv)
    assert ref.shape == rows.shape == (POINTS, 4)
    np.testing.assert_allclose(ref[:, 0], rows[:, 0], atol=1e-9)
    err = np.abs(ref[:, 1:] - rows[:, 1:]).max()
    assert err <= SPICE_TOL_V, f"max |Δ| {err * 1e3:.4f} mV"
    # the printed table carries 6–7 significant digits
    assert printed.shape == (POINTS, 4)
    np.testing.assert_allclose(printed, rows, atol=SPICE_TOL_V + 1e-5)


def test_export_needs_an_output(capsys):
    code = main(["export", str(KNEE)])
    err = capsys.readouterr().err
    assert code != 0 and "--spice" in err and "Traceback" not in err
