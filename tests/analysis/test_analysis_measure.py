"""The measurement report against outside references.

* Swept response of a stage with known dynamics: scipy.signal (``cont2discrete`` with ZOH,
  ``dfreqz``) on the same continuous transfer function, written from the textbook forms
  k/(s + k) and ω0²/(s² + 2ζω0·s + ω0²) — not from the engine's state-space code.
* Single pole: −3 dB at f_c and low-frequency group delay 1/(2π·f_c) (any linear-systems text;
  REFERENCES.md), with the pixel-clock sampling accounted for (see the tests' comments).
* Log stage: the transdiode law Vout = −n·VT·ln(I/IS) (AN-30, MT-077; REFERENCES.md): step
  heights ΔV = −n·VT·ln(I2/I1) do not depend on IS, so they scale exactly with T.
* Knob: an inverting stage's gain −Rf/Rin (any op-amp text).
"""

from __future__ import annotations

import json
import math

import cv2
import numpy as np
import pytest
from scipy import signal

from livecurve.analysis.measure import (
    linearity_from_levels,
    make_bench,
    measure,
    parse_sweep,
    sweep_knob,
)
from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import parse_chain
from livecurve.config.limits import Limits, parse_limits
from livecurve.errors import ConfigError
from tests.conftest import run_cli

CLOCK_HZ = 74.25e6          # SMPTE ST 274, 1080p30
T_PIX = 1.0 / CLOCK_HZ
#: Op-amp open-loop gain used in the chains below (the chain file's default, 2e5): the closed-loop
#: gain of an inverting stage is −(Rf/Rin)/(1 + (1 + Rf/Rin)/A_ol) (any op-amp text).
A_OL = 2e5


def _chain(stages, **kw):
    raw = {"title": "test chain", "space": "ypbpr", "standard": "bt709", "stage": stages, **kw}
    return parse_chain(raw, path="test.toml")


def _inv(sid, r_in, r_f, **extra):
    return {"id": sid, "kind": "inverting_gain", "r_in": r_in, "r_f": r_f, **extra}


def _linear_chain(gbw="6MHz", **dyn):
    """Two inverting stages of gain −1: DC gain +1; the second carries the dynamics (noise
    gain 2, so a GBW of 6 MHz gives a single pole at f_c = 3 MHz)."""
    return _chain([_inv("a", "10k", "10k"),
                   _inv("b", "10k", "10k", dynamics={"gbw": gbw, **dyn})])


@pytest.fixture(scope="module")
def pole_report():
    return measure(make_bench(_linear_chain()))


def test_single_pole_3db_and_delay_match_theory(pole_report):
    c = pole_report["channels"][0]
    fc = 6e6 / 2.0
    # The engine holds each pixel over T and reads the output at the end of the pixel: the
    # discrete filter is y[n] = a·y[n−1] + (1 − a)·u[n], a = exp(−2π·f_c·T) (exact ZOH).
    a = math.exp(-2 * math.pi * fc * T_PIX)
    # Its −3 dB point solves |1 − a·e^{−jθ}|² = 2(1 − a)², θ = 2πfT (computed here: 0.12 % above
    # f_c at 3 MHz, growing to ~6 % at 10 MHz on this clock).
    theta = math.acos((1 + a * a - 2 * (1 - a) ** 2) / (2 * a))
    f3_discrete = theta / (2 * math.pi * T_PIX)
    assert c["f_3db_hz"] == pytest.approx(f3_discrete, rel=2e-4)  # measured: 1.2e-3 % off
    assert c["f_3db_hz"] == pytest.approx(fc, rel=0.01)              # 1/(2π·RC) theory
    # Group delay: analog 1/(2π·f_c); ZOH adds T/2 and reading at the end of the pixel removes
    # T, so the picture shows 1/(2π·f_c) − T/2 (to first order in f_c·T).  The measurement takes
    # −Δφ/Δω between its two lowest tones (103 and 155 kHz): compare with the same difference
    # of the discrete filter's phase, and with theory.
    f_lo = [p["freq_hz"] for p in c["response"][:2]]
    z = np.exp(-2j * np.pi * np.array(f_lo) * T_PIX)
    ph = np.unwrap(np.angle((1 - a) / (1 - a * z)))
    tau_discrete = -(ph[1] - ph[0]) / (2 * np.pi * (f_lo[1] - f_lo[0]))
    assert c["delay_ns"] == pytest.approx(tau_discrete * 1e9, rel=1e-4)
    # The pulse centroid moves by the group delay at 0 Hz, T·a/(1 − a) for this filter.
    assert c["pulse_delay_ns"] == pytest.approx(1e9 * T_PIX * a / (1 - a), rel=1e-4)
    tau_theory_ns = 1e9 / (2 * math.pi * fc) - 0.5 * T_PIX * 1e9   # 53.05 − 6.73 ns
    assert c["delay_ns"] == pytest.approx(tau_theory_ns, rel=0.01)   # measured: 0.4 % off


def test_single_pole_at_sd_clock():
    """At 13.5 MHz (ITU-R BT.601) a 1 MHz pole: f_c·T is larger, the same discrete law holds."""
    rep = measure(make_bench(_linear_chain(gbw="2MHz"), fmt="576i"))
    c = rep["channels"][0]
    t = 1 / 13.5e6
    a = math.exp(-2 * math.pi * 1e6 * t)
    f3 = math.acos((1 + a * a - 2 * (1 - a) ** 2) / (2 * a)) / (2 * math.pi * t)
    assert rep["format"] == "576i" and rep["pixel_clock_hz"] == 13.5e6
    assert c["f_3db_hz"] == pytest.approx(f3, rel=1e-3)          # measured: 2e-4 off (bins)
    # T·a/(1 − a) = T·(1/x − 1/2 + x/12 − …), x = 2π·f_c·T = 0.47 here: the first-order
    # 1/(2π·f_c) − T/2 = 122.1 ns misses the x/12 term (+2.9 ns); the exact discrete delay is
    # 125.0 ns at 0 Hz; the measurement, −Δφ/Δω between tones at 50 and 75 kHz, reads 124.35
    # ns (a pole's group delay falls as 1/(1 + (f/f_c)²)).  Same phase difference, exact:
    f_lo = np.array([p["freq_hz"] for p in c["response"][:2]])
    ph = np.unwrap(np.angle((1 - a) / (1 - a * np.exp(-2j * np.pi * f_lo * t))))
    tau = -(ph[1] - ph[0]) / (2 * np.pi * (f_lo[1] - f_lo[0]))
    assert c["delay_ns"] == pytest.approx(1e9 * tau, rel=1e-4)
    assert c["delay_ns"] == pytest.approx(1e9 * t * a / (1 - a), rel=0.01)
    assert c["delay_ns"] == pytest.approx(1e9 * (1 / (2 * math.pi * 1e6) - t / 2), rel=0.03)
    assert [p["freq_hz"] for p in c["multiburst"]][-1] == 5.75e6   # BT.601 passband


def test_swept_response_equals_scipy(pole_report):
    """Single pole and pole + resonance against scipy.signal on the same ZOH discrete filter."""
    fc = 3e6
    k = 2 * math.pi * fc
    cases = [(pole_report, [k], [1.0, k])]
    w0, zeta = 2 * math.pi * 12e6, 0.4
    rep2 = measure(make_bench(_linear_chain(gbw="40MHz", f_ring="12MHz", zeta=zeta)))
    k2 = 2 * math.pi * 20e6
    cases.append((rep2, [k2 * w0 * w0], np.polymul([1.0, k2], [1.0, 2 * zeta * w0, w0 * w0])))
    for rep, num, den in cases:
        c = rep["channels"][0]
        f = np.array([p["freq_hz"] for p in c["response"]])
        got = np.array([p["gain_db"] for p in c["response"]])
        bd, ad, _dt = signal.cont2discrete((num, den), T_PIX, method="zoh")
        _w, h = signal.freqz(bd.ravel(), ad, worN=f, fs=CLOCK_HZ)
        h = h * np.exp(2j * np.pi * f * T_PIX)  # output read at the end of the pixel: × z
        ref = 20 * np.log10(np.abs(h))   # unity gain at DC
        assert np.max(np.abs(got - ref)) < 0.05   # the claim; measured: below 1e-4 dB
        assert np.max(np.abs(got - ref)) < 1e-3


def test_linear_chain_is_linear_and_channels_match(pole_report):
    for c in pole_report["channels"]:
        assert c["nonlinearity_pct"] <= 0.1     # the claim; measured ~2e-4 %
        # DC gain of two −1 stages with finite A_ol (op-amp text): (1/(1 + 2/A_ol))²
        assert c["dc_gain"] == pytest.approx(1.0 / (1 + 2 / A_OL) ** 2, abs=2e-5)
    pb = pole_report["channels"][1]
    assert pb["delay_vs_ch0_ns"] == pytest.approx(0.0, abs=1e-6)  # same stages on every channel


def test_luma_only_dynamics_show_as_delay_inequality():
    s = _chain([_inv("a", "10k", "10k", channels=[0]),
                _inv("b", "10k", "10k", channels=[0], dynamics={"gbw": "6MHz"})])
    rep = measure(make_bench(s))
    y, pb = rep["channels"][0], rep["channels"][1]
    assert pb["delay_ns"] == pytest.approx(0.0, abs=1e-6)  # no stage: identity
    assert pb["delay_vs_ch0_ns"] == pytest.approx(-y["delay_ns"], abs=1e-9)
    assert not pb["checks"]["delay_vs_ch0_ns"]["pass"]        # 46 ns against the 5 ns default
    assert pb["f_3db_hz"] is None and pb["overshoot_pct"] == 0.0


def _log_chain(**dev):
    return _chain([{"id": "lg", "kind": "log_transdiode", "r_in": "10k", "i_ref": "60uA",
                    "junction": "diode", "device": {"is": "1e-14", "n": 1.0, **dev}}])


def test_log_stage_nonlinearity_matches_its_dc_curve():
    s = _log_chain()
    c = measure(make_bench(s))["channels"][0]
    levels = 0.07 * np.arange(11) - 0.35            # the 10-step staircase, 0…700 mV
    ref = linearity_from_levels(levels, ChainModel(s).transfer(0, levels))
    assert c["nonlinearity_pct"] == pytest.approx(ref["nonlinearity_pct"], abs=0.01)
    assert c["max_deviation_pct"] == pytest.approx(ref["max_deviation_pct"], abs=0.01)
    # Transdiode law: step k spans currents I_k = 25 µA + 7 µA·k → heights ∝ ln(I_k+1/I_k).
    i = 25e-6 + 7e-6 * np.arange(11)
    h = np.log(i[1:] / i[:-1])
    law = 100 * (h.max() - h.min()) / h.max()
    assert c["nonlinearity_pct"] == pytest.approx(law, abs=0.05)   # measured: 0.001 off


def test_temperature_scales_log_steps_with_t():
    s = _log_chain(rs="0")
    cold = measure(make_bench(s, t_kelvin=273.15))["channels"][0]
    hot = measure(make_bench(s, t_kelvin=323.15))["channels"][0]
    # ΔV = −n·VT·ln(I2/I1), VT = kT/q: the gain ratio is the temperature ratio; IS(T) cancels.
    assert hot["dc_gain"] / cold["dc_gain"] == pytest.approx(323.15 / 273.15, rel=1e-3)
    assert hot["nonlinearity_pct"] == pytest.approx(cold["nonlinearity_pct"], abs=0.01)


def test_knob_sweep_follows_rf_over_rin():
    s = _chain([_inv("a", "10k", "10k"), _inv("b", "10k", "10k")],
               live={"gain": {"target": "b.r_f", "min": "5k", "max": "20k"}})
    name, vals = parse_sweep("gain=5k:20k:4", s)
    sw = sweep_knob(make_bench(s), name, vals)
    for rf, g in zip(vals, sw["channels"][0]["dc_gain"], strict=True):
        ideal = rf / 10e3                                     # (−1)·(−Rf/Rin)
        assert g == pytest.approx(ideal / (1 + 2 / A_OL) / (1 + (1 + ideal) / A_OL), rel=1e-4)
    with pytest.raises(ConfigError):
        parse_sweep("gain=1k:20k:4", s)          # outside the knob's range
    with pytest.raises(ConfigError):
        parse_sweep("gain=5k:20k", s)


def test_limits_table_parsed_and_refused():
    lim = parse_limits({"f_3db_min": "1MHz", "overshoot_pct": 2})
    assert lim.f_3db_min_hz == 1e6 and lim.overshoot_pct == 2.0
    assert lim.flatness_db == Limits().flatness_db
    with pytest.raises(ConfigError, match="limits.overshot"):
        parse_limits({"overshot": 2}, path="x.toml")
    with pytest.raises(ConfigError, match="limits.ringing_pct"):
        parse_limits({"ringing_pct": -1})


def test_overshoot_of_resonance_against_second_order_formula():
    """A resonance of ζ = 0.3 at 5 MHz (ring period 200 ns, far slower than the bar's 34 ns
    edge): the edge response approaches the step overshoot exp(−ζπ/√(1−ζ²)) = 37.2 %
    (control texts; REFERENCES.md).  The 2T edge lowers it a little."""
    rep = measure(make_bench(_linear_chain(gbw="2GHz", f_ring="5MHz", zeta=0.3)))
    c = rep["channels"][0]
    step = 100 * math.exp(-0.3 * math.pi / math.sqrt(1 - 0.09))
    assert step * 0.9 < c["overshoot_pct"] <= step
    assert not c["checks"]["overshoot_pct"]["pass"]


CHAIN_TOML = """
title = "measure cli"
space = "ypbpr"
standard = "bt709"
[[stage]]
id = "a"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
[[stage]]
id = "b"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
[stage.dynamics]
gbw = "6MHz"
[live.gain]
target = "b.r_f"
min = "5k"
max = "20k"
[limits]
f_3db_min = "2MHz"
"""


def test_cli_json_png_sweep_and_output_policy(tmp_path):
    chain = tmp_path / "c.toml"
    chain.write_text(CHAIN_TOML)
    js, png = tmp_path / "m.json", tmp_path / "m.png"
    r = run_cli("measure", chain, "--json", js, "--png", png, "--sweep", "gain=5k:20k:3",
                "--temp-c", "40")
    assert r.returncode == 0, r.stderr
    data = json.loads(js.read_text())
    assert [c["channel"] for c in data["channels"]] == [0, 1, 2]
    for c in data["channels"]:
        for key in ("f_3db_hz", "delay_ns", "nonlinearity_pct", "overshoot_pct"):
            assert key in c and (c[key] is None or isinstance(c[key], float))
        assert all(set(p) == {"freq_hz", "gain_db"} for p in c["response"])
        assert len(c["response"]) > 30
    assert data["channels"][0]["checks"]["f_3db_hz"]["limit"] == 2e6   # from [limits]
    assert data["channels"][0]["checks"]["f_3db_hz"]["pass"]
    assert data["t_kelvin"] == pytest.approx(313.15)
    assert data["sweep"]["values"] == [5e3, 12.5e3, 20e3]
    sheet = cv2.imread(str(png))
    assert sheet is not None and sheet.shape[:2] == (840, 1500)    # 2 × 3 panels at 100 dpi
    assert sheet.std() > 10                                          # not a blank page
    assert "channel 0" in r.stdout and "-3 dB 3.02 MHz" in r.stdout
    before = js.read_bytes()
    r = run_cli("measure", chain, "--json", js)
    assert r.returncode == 3 and "exists" in r.stderr
    assert js.read_bytes() == before
    r = run_cli("measure", chain, "--json", js, "--force", "--set", "gain=20k")
    assert r.returncode == 0, r.stderr
    assert json.loads(js.read_text())["channels"][0]["dc_gain"] == pytest.approx(2.0, rel=1e-3)


def test_cli_bad_limits_key_exit_2(tmp_path):
    chain = tmp_path / "c.toml"
    chain.write_text(CHAIN_TOML + "overshot = 3\n")
    r = run_cli("measure", chain)
    assert r.returncode == 2
    assert "limits.overshot" in r.stderr and "c.toml" in r.stderr
