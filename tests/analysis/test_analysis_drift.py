"""Drift over temperature: handbook figures, ngspice ``.temp`` sweeps, outputs.

References
----------
* VBE (junction voltage) at constant current falls by about 2 mV/K (−1.8 … −2.2 mV/K
  depending on current): common practice; Sedra & Smith, *Microelectronic Circuits*.
* From the Shockley law and the SPICE IS(T) law (REFERENCES.md), at constant current and
  N = 1: dV/dT = (V − EG − XTI·VT)/T  (EG in volts) — derived in this file's docstring of
  ``test_transdiode_tempco``.
* Transdiode log amp: Vout = −VT·ln(Vin/(R·IS)), so its volts per decade VT·ln10 grow ∝ T
  (TI/National AN-30 "Log Converters"); VT·ln10 = 59.53 mV at 300 K (CODATA k, q).
* ngspice 39 (Debian package ``ngspice``) runs the deck livecurve exports, at ``.temp``.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from livecurve.analysis.drift import (
    CSV_HEADER,
    drift_curves,
    reference_frame,
    run_drift,
    strip_frames,
    temperature_steps,
)
from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import load_chain, parse_chain
from livecurve.errors import ConfigError, OutputError
from tests.circuit._spice_run import ngspice_chain_sweep

K_B, Q_E = 1.38064852e-23, 1.6021766208e-19  # CODATA 2014, as ngspice 39
ROOT = __import__("pathlib").Path(__file__).resolve().parents[2]
#: livecurve against ngspice on drift curves, volts: measured here 0.06 µV (log chain) and
#: 0.11 µV (night_knee) at 0 °C, 25 °C and 50 °C with the decks' RELTOL = 1e-7; held at
#: 0.5 µV (a margin of ×4.5 over the worst).
SPICE_TOL_V = 0.5e-6


def _log_chain(points_from="0.1V", points_to="1V"):
    raw = {"space": "rgb", "ambient": "27C",
           "stage": [{"id": "lg", "kind": "log_transdiode", "r_in": "10k",
                      "junction": "diode", "device": {"is": "1e-14"}}],
           "sweep": {"from": points_from, "to": points_to}}
    return parse_chain(raw, path="log.toml")


def test_transdiode_tempco():
    """V = VT·ln(I/IS(T)) with ln IS(T) = ln IS + EG/VT·(T/Tnom − 1) + XTI·ln(T/Tnom) gives
    dV/dT = V/T − VT·(EG/(VT·T) + XTI/T) = (V − EG − XTI·VT)/T."""
    spec = _log_chain()
    vin, out = drift_curves(spec, [299.65, 300.65], points=10)
    k = int(np.argmin(np.abs(vin - 1.0)))  # 1 V / 10 kΩ = 100 µA
    dvout_dt = (out[1, 0, k] - out[0, 0, k]) / 1.0
    # the output is minus the junction voltage: +2 mV/K per the handbook figure
    assert 1.8e-3 <= dvout_dt <= 2.2e-3, dvout_dt
    t = 300.15
    v = -0.5 * (out[1, 0, k] + out[0, 0, k])
    law = (v - 1.11 - 3 * K_B * t / Q_E) / t
    assert -dvout_dt == pytest.approx(law, rel=2e-3)


@pytest.mark.parametrize("t_kelvin", [273.15, 300.0, 323.15])
def test_log_scale_grows_with_temperature(t_kelvin):
    vin, out = drift_curves(_log_chain(), [t_kelvin], points=10)
    i1, i2 = int(np.argmin(np.abs(vin - 0.1))), int(np.argmin(np.abs(vin - 1.0)))
    per_decade = out[0, 0, i1] - out[0, 0, i2]
    assert per_decade == pytest.approx(K_B * t_kelvin / Q_E * math.log(10), rel=1e-4)
    if t_kelvin == 300.0:
        assert per_decade == pytest.approx(59.53e-3, abs=0.01e-3)  # REFERENCES.md


@pytest.mark.parametrize("which", ["log", "night_knee"])
def test_drift_agrees_with_ngspice_temp_sweeps(which, ngspice, tmp_path):
    spec = _log_chain() if which == "log" else load_chain(ROOT / "configs" / "night_knee.toml")
    temps = np.array([273.15, 298.15, 323.15])
    points = 46
    vin, out = drift_curves(spec, temps, points=points)
    worst = 0.0
    for i, t in enumerate(temps):
        v_ref, y_ref = ngspice_chain_sweep(ngspice, ChainModel(spec), points, float(t),
                                           tmp_path, tag=f"{which}{i}")
        np.testing.assert_allclose(v_ref, vin, atol=1e-9)
        worst = max(worst, float(np.abs(y_ref - out[i]).max()))
    assert worst < SPICE_TOL_V, worst
    # the drift itself is large compared with the disagreement (not a flat comparison)
    assert np.abs(out[-1, 0] - out[0, 0]).max() > 50 * SPICE_TOL_V


def test_csv_round_trip(tmp_path):
    spec = _log_chain()
    rep = run_drift(spec, from_k=273.15, to_k=323.15, steps=6, csv=tmp_path / "d.csv",
                    points=11)
    text = (tmp_path / "d.csv").read_text()
    assert text.splitlines()[0] == CSV_HEADER
    data = np.loadtxt(tmp_path / "d.csv", delimiter=",", skiprows=1)
    assert data.shape == (66, 5)
    vin, out = drift_curves(spec, rep.temps_k, points=11)
    np.testing.assert_allclose(data[:, 0], np.repeat(rep.temps_k - 273.15, 11), atol=1e-6)
    np.testing.assert_allclose(data[:, 1], np.tile(vin, 6), atol=1e-9)
    np.testing.assert_allclose(data[:, 2:], out.transpose(0, 2, 1).reshape(-1, 3), atol=1e-9)
    assert rep.tempco_mv_per_k[0] > 1.5  # −VBE rises ≈ 2 mV/K


def test_strip_follows_the_curves():
    spec = load_chain(ROOT / "configs" / "night_knee.toml")
    temps = [273.15, 298.15, 323.15]
    frames = strip_frames(spec, temps)
    h = frames[0].shape[0] // 3
    wedge = [f[:h].astype(float).mean() for f in frames]
    vin, out = drift_curves(spec, temps, points=21)
    # luma output falls with temperature at every input (−VBE·gain with an inverting restore)
    assert np.all(np.diff(out[:, 0], axis=0) < 0)
    assert wedge[0] > wedge[1] > wedge[2]


def test_strip_of_a_resistor_chain_does_not_drift():
    raw = {"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain", "r_in": "10k",
                                      "r_f": "10k"}]}
    frames = strip_frames(parse_chain(raw, path="r.toml"), [273.15, 373.15])
    np.testing.assert_array_equal(frames[0], frames[1])


def test_strip_at_ambient_equals_the_frame_path():
    from livecurve.engine.frameflow import FrameFlow
    spec = load_chain(ROOT / "configs" / "shadow_crush.toml")
    frame = reference_frame(160, 90)
    got = strip_frames(spec, [spec.ambient_k], frame=frame)[0]
    flow = FrameFlow(spec, width=160, height=90, fps=30.0, out_dtype=np.uint8)
    np.testing.assert_array_equal(got, flow.process(frame, 0))


def test_reference_frame_content():
    f = reference_frame(220, 90)
    assert f.dtype == np.uint16 and f.shape == (90, 220, 3)
    assert f[0, 0].tolist() == [0, 0, 0] and f[0, -1].tolist() == [65535] * 3
    assert f[0, 110, 0] == round(0.5 * 65535)  # wedge step 5 of 0…10
    q = round(0.75 * 65535)
    assert f[-1, 10].tolist() == [q, q, q]  # 75 % white bar (bars are 27.5 px wide here)
    assert f[-1, 40].tolist() == [q, q, 0]  # then yellow


def test_run_drift_writes_pictures(tmp_path):
    spec = load_chain(ROOT / "configs" / "film_shoulder.toml")
    still = reference_frame(640, 360)
    cv2.imwrite(str(tmp_path / "still.png"), still[:, :, ::-1])
    rep = run_drift(spec, from_k=273.15, to_k=323.15, steps=5, png=tmp_path / "d.png",
                    strip_png=tmp_path / "s.png", frame_source=tmp_path / "still.png",
                    points=41)
    fig = cv2.imread(str(tmp_path / "d.png"))
    assert fig.shape == (700, 1440, 3)  # a 14.4 × 7 in figure at 100 dpi
    strip = cv2.imread(str(tmp_path / "s.png"))
    # 4 columns × 2 rows of 480 × 270 tiles (the still scaled to 480 wide)
    assert strip.shape == (8 + 2 * (270 + 26 + 8), 8 + 4 * (480 + 8), 3)
    assert len(rep.written) == 2 and any("mV/K" in ln for ln in rep.lines())


@pytest.mark.parametrize("args,key", [((273.15, 323.15, 1), "--steps"),
                                      ((323.15, 273.15, 5), "--to"),
                                      ((273.15, 500.0, 5), "--to"),
                                      ((100.0, 300.0, 5), "--from")])
def test_bad_ranges(args, key):
    with pytest.raises(ConfigError, match=key):
        temperature_steps(*args)


def test_existing_output_needs_force(tmp_path):
    (tmp_path / "d.csv").write_text("keep")
    with pytest.raises(OutputError, match="exists"):
        run_drift(_log_chain(), from_k=273.15, to_k=323.15, steps=3, csv=tmp_path / "d.csv",
                  force=False)
    assert (tmp_path / "d.csv").read_text() == "keep"


def test_drift_figure_panels_stand_alone(tmp_path):
    from livecurve.analysis.drift import drift_curves, drift_figure
    spec = load_chain(ROOT / "configs" / "night_knee.toml")
    temps = temperature_steps(273.15, 323.15, 4)
    vin, out = drift_curves(spec, temps, points=21)
    fig = drift_figure(vin, out, temps, spec)
    panels = [ax for ax in fig.axes if ax.get_label() != "<colorbar>"]
    assert len(panels) == 6
    for ax in panels:
        # no panel shares an axis with another: each scales to its own curves
        assert ax.get_shared_y_axes().get_siblings(ax) == [ax]
        assert ax.get_shared_x_axes().get_siblings(ax) == [ax]
        assert "[V]" in ax.get_xlabel() and ("[V]" in ax.get_ylabel()
                                             or "[mV]" in ax.get_ylabel())
        assert len(ax.get_lines()) == 4  # one line per temperature
    # Y′ moves with temperature, Pb/Pr pass through: their panels are scaled separately
    assert panels[3].get_ylim() != panels[4].get_ylim()
    # the shift panel of channel 0 shows exactly (out(T) − out(T0)) in mV
    for k, ln in enumerate(panels[3].get_lines()):
        np.testing.assert_allclose(ln.get_ydata(), (out[k, 0] - out[0, 0]) * 1e3)
    assert "°C" in fig.get_suptitle() and "knee_current = 60 µA" in fig.get_suptitle()
    cbar = [ax for ax in fig.axes if ax.get_label() == "<colorbar>"]
    assert cbar and "[°C]" in cbar[0].get_ylabel()
