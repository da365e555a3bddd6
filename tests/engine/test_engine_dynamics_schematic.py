"""Line-rate dynamics derived from a netlist stage's own schematic, against ngspice.

Reference: ngspice 39 (Debian package ``ngspice``) on decks written here by hand for the
same circuits, with the op-amp as a single-pole macro model: a transconductance gm into
R‖C (A0 = gm·R, GBW = gm/(2π·C)) and a unity buffer (any op-amp text, from memory).
Checks (the issue's bounds): ``.ac`` magnitude within 0.1 dB and phase within 1° up to
0.4 × the pixel clock; ``.tran`` response to a step at t = 0 within 1 % of the step at
every pixel, the engine's samples read at the end of each pixel.
Timing: 74.25 MHz pixel clock (SMPTE ST 274, 1080p30).
"""

from __future__ import annotations

import math
import subprocess

import numpy as np
import pytest

from livecurve.circuit.stages import OpampSpec
from livecurve.circuit.userdeck import build_user_stage
from livecurve.config.chainfile import parse_chain
from livecurve.engine.dynamics import SchematicDynamics, discretise, schematic_dynamics
from livecurve.outputs.steps import step_responses

F_PIX = 74.25e6
A0 = 2e5
GBW = 100e6
GM = 1e-3

#: Our own example stages: (name, element lines, input step from, to).  Steps start at the
#: blanking level (−0.35 V on an RGB channel), where every line starts in the engine.
CASES = {
    # compensation capacitor across the feedback resistor: a pole at 1/(2π·Rf·Cf) = 16.9 MHz
    "comp_cap": (["RIN in sum 1k", "RF sum out 2k", "CF sum out 4.7p", "U1 0 sum out"],
                 -0.35, 0.05),
    # RC input network ahead of a follower: a pole at 1/(2π·R·C) = 14.2 MHz
    "rc_input": (["R1 in p 510", "C1 p 0 22p", "U1 p out out"], -0.35, 0.35),
    # follower into a series R–L and a shunt C: rings near 16 MHz, ζ ≈ 0.1
    "lc_ring": (["U1 in x x", "RS x y 10", "L1 y out 1u", "C1 out 0 100p", "RL out 0 1k"],
                -0.35, -0.15),
}


def _opamp_cards(p, n, o, tag):
    c = GM / (2 * math.pi * GBW)
    return [f"G{tag} 0 {tag}n {p} {n} {GM}", f"R{tag} {tag}n 0 {A0 / GM}",
            f"C{tag} {tag}n 0 {c:.15e}", f"E{tag} {o} 0 {tag}n 0 1"]


def _hand_cards(lines):
    """The element lines as plain SPICE cards, the op-amp as the macro model."""
    cards = []
    for ln in lines:
        f = ln.split()
        if f[0].startswith("U"):
            cards += _opamp_cards(f[1], f[2], f[3], f[0])
        else:
            cards.append(ln)
    return cards


def _run(ngspice, tmp_path, name, text):
    cir = tmp_path / f"{name}.cir"
    cir.write_text(text)
    proc = subprocess.run([ngspice, "-b", str(cir)], capture_output=True, text=True,
                          timeout=120, cwd=tmp_path)
    dat = tmp_path / f"{name}.dat"
    assert proc.returncode == 0 and dat.exists(), proc.stdout[-2000:] + proc.stderr[-2000:]
    return np.loadtxt(dat, skiprows=1, ndmin=2)


def _stage(lines):
    return build_user_stage(lines, {}, OpampSpec(a_ol=A0, gbw_hz=GBW), name="s", key="s")


@pytest.mark.parametrize("case", list(CASES))
def test_schematic_ac_matches_ngspice(ngspice, tmp_path, case):
    lines, _, _ = CASES[case]
    dyn = schematic_dynamics(_stage(lines))
    assert isinstance(dyn, SchematicDynamics)
    deck = "\n".join([f"* {case}: small-signal response", "VIN in 0 DC 0 AC 1",
                      *_hand_cards(lines),
                      ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16",
                      f".ac lin 200 100k {0.4 * F_PIX:.6e}", ".control", "set wr_singlescale",
                      "set wr_vecnames", "run", f"wrdata {case}.dat vr(out) vi(out)", "quit",
                      ".endc", ".end", ""])
    ref = _run(ngspice, tmp_path, case, deck)
    f, h_ref = ref[:, 0], ref[:, 1] + 1j * ref[:, 2]
    h = dyn.dc_gain * dyn.response(f)
    db = 20 * np.log10(np.abs(h) / np.abs(h_ref))
    deg = np.degrees(np.angle(h / h_ref))
    # measured: <= 1.5e-7 dB and 2e-6 degrees; bounds 0.1 dB and 1 degree (the issue's)
    assert np.max(np.abs(db)) <= 0.1, np.max(np.abs(db))
    assert np.max(np.abs(deg)) <= 1.0, np.max(np.abs(deg))
    # the response really changes over the band (so the check means something)
    assert np.ptp(np.abs(h)) / abs(dyn.dc_gain) > 0.2


@pytest.mark.parametrize("case", list(CASES))
def test_schematic_step_through_the_engine_matches_ngspice_tran(ngspice, tmp_path, case):
    """The chain's step response (static table + the schematic's line filter, as render and
    preview run it) against ngspice ``.tran`` of the same circuit with a step at t = 0."""
    lines, v0, v1 = CASES[case]
    spec = parse_chain({"title": case, "space": "rgb", "format": "1080p30",
                        "opamp": {"a_ol": A0, "gbw": "100MHz"},
                        "sweep": {"from": "-0.5V", "to": "0.5V"},
                        "stage": [{"id": "s", "kind": "netlist", "channels": [0],
                                   "elements": lines}]})
    t, y = step_responses(spec, samples=120, lead=10, from_v=v0, to_v=v1)
    deck = "\n".join([f"* {case}: step at t = 0", f"VIN in 0 PWL(0 {v0} 1e-15 {v1})",
                      *_hand_cards(lines),
                      ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16",
                      f".tran 1p {t[-1] + 1e-9:.6e} 0 20p", ".control", "set wr_singlescale",
                      "set wr_vecnames", "run", f"wrdata {case}.dat v(out)", "quit", ".endc",
                      ".end", ""])
    ref = _run(ngspice, tmp_path, case, deck)
    want = np.where(t <= 0, ref[0, 1], np.interp(t, ref[:, 0], ref[:, 1]))
    step = abs(ref[-1, 1] - ref[0, 1])
    err = np.max(np.abs(y[0] - want)) / step
    # measured: <= 1e-6 of the step (all three); bound 1 % of the step (the issue's)
    assert err <= 0.01, f"{case}: worst pixel {100 * err:.3f} % of the step"
    # channels without the stage pass the step straight through
    np.testing.assert_allclose(y[1][t > 0], v1, atol=1e-6)


@pytest.mark.parametrize("case", list(CASES))
def test_schematic_filter_is_the_zoh_discretisation(case):
    """The line filter (one block for up to two states, else cascaded sections) is the
    exact ZOH equivalent: its step response equals scipy.signal.cont2discrete(zoh) of the
    same state space, sampled at pixel ends."""
    from scipy import signal
    dyn = schematic_dynamics(_stage(CASES[case][0]))
    a, b, c, d = dyn.matrices
    t = 1 / F_PIX
    phi, gam, _, _, _ = signal.cont2discrete((a, b[:, None], c[None, :], [[d]]), t, "zoh")
    x = np.zeros(a.shape[0])
    want = []
    for _ in range(200):
        x = phi @ x + gam[:, 0]
        want.append(c @ x + d)
    from livecurve.engine.dynamics import step_response
    got = step_response(discretise(dyn, t), pixel_period_s=t, n=200)
    # float32 planes in the kernel: measured 1e-7; bound 1e-6 of the step
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-6)
    if case == "lc_ring":
        assert np.max(want) > 1.2  # it rings


def test_channel_override_of_a_capacitor_reaches_that_channel_filter():
    """Three boards built alike, one with a larger compensation capacitor: its channel's
    filter is derived from its own value (pole 1/(2π·Rf·Cf): 16.9 MHz vs 7.2 MHz)."""
    from livecurve.engine.pipeline import FrameEngine
    lines = CASES["comp_cap"][0]
    spec = parse_chain({"title": "boards", "space": "rgb", "format": "1080p30",
                        "opamp": {"a_ol": A0},
                        "stage": [{"id": "s", "kind": "netlist", "elements": lines}],
                        "channel": {"1": {"s.CF": "11p"}}})
    eng = FrameEngine(spec, pixel_period_s=1 / F_PIX)
    dyn = [eng.runs[ch][0].dynamics for ch in range(3)]
    assert dyn[0] == dyn[2] and dyn[0] != dyn[1]
    for d, cf in ((dyn[0], 4.7e-12), (dyn[1], 11e-12)):
        # an ideal-ish op-amp (no gbw): the one pole of −Rf/Rin/(1 + s·Rf·Cf)
        assert d.bandwidth_3db_hz == pytest.approx(1 / (2 * math.pi * 2e3 * cf), rel=1e-3)


def test_a_stage_without_dc_gain_is_refused_by_name():
    """A series capacitor blocks DC: there is no static curve to split the filter from."""
    from livecurve.errors import ConfigError
    net = build_user_stage(["C1 in x 1n", "RL x 0 1k", "U1 x out out"], {},
                           OpampSpec(a_ol=A0), name="coupled", key="s")
    with pytest.raises(ConfigError, match="coupled"):
        schematic_dynamics(net)
