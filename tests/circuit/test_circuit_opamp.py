"""The op-amp element: its static law and its real-part parameters (offset voltage, bias
currents, output resistance), against handbook closed forms and hand-written ngspice decks.

Sources (REFERENCES.md; op-amp handbook facts from memory, e.g. S. Franco, *Design with
Operational Amplifiers and Analog Integrated Circuits*, ch. 1 and 5):

* finite-gain inverting amplifier: Vout = −(Rf/Rin)·Vin / (1 + (1 + Rf/Rin)/A);
* input offset voltage appears at the output times the noise gain 1 + Rf/Rin;
* a bias current drawn out of the inverting input appears at the output as +Rf·Ib;
* transdiode log stage: the junction carries Vin/R + Iref − Ib (AN-30 / MT-077 form with
  the op-amp's bias current taken out of the summing node).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from livecurve.circuit.devices import K_BOLTZMANN, Q_ELECTRON, DiodeModel
from livecurve.circuit.netlist import KNEE_V, Netlist, opamp_law, solve_sweep
from livecurve.circuit.spice import check_deck, stage_deck
from livecurve.circuit.stages import KINDS, OpampSpec, build_stage
from tests.circuit._spice_run import ngspice_stage_sweep, run_ngspice

#: The asymmetric-rails case: +12/−5 V, 1.5 V headroom, A = 20k, gain −4.55.
ASYM = OpampSpec(a_ol=20e3, v_pos_v=12.0, v_neg_v=-5.0, headroom_v=1.5)
R_IN, R_F = 10e3, 45.5e3


DEFAULT_OP = OpampSpec()


def _stage(kind, device=None, op=DEFAULT_OP, **given):
    params = {p.name: given.get(p.name, p.default) for p in KINDS[kind].params}
    return build_stage(kind, params, device, op, name=kind)


def _knee_by_hand(d, hi, lo, k):
    """The documented law (docs/chain-files.md, op-amp section) written out piece by piece."""
    if d >= hi + k:
        return hi
    if d > hi - k:
        return d - (d - hi + k) ** 2 / (4 * k)
    if d <= lo - k:
        return lo
    if d < lo + k:
        return d + (lo + k - d) ** 2 / (4 * k)
    return d


def test_inverting_gain_on_asymmetric_rails_has_no_offset():
    """Finite-gain inverting amplifier on +12/−5 V rails: the closed form exactly, and
    0 V out for 0 V in (the old tanh law centred between the limits gave +1.07 mV here)."""
    net = _stage("inverting_gain", op=ASYM, r_in=R_IN, r_f=R_F)
    vin = np.linspace(-0.6, 0.6, 121)
    y = solve_sweep(net, vin, t_kelvin=300.15)
    ng = 1 + R_F / R_IN
    want = -(R_F / R_IN) * vin / (1 + ng / ASYM.a_ol)  # handbook finite-gain form
    # measured: 4e-16 V worst (old law: 2.0 mV worst, +1.07 mV at 0 V); bound 1 nV
    # (the solver's convergence tolerance is 0.1 nV)
    np.testing.assert_allclose(y, want, rtol=0, atol=1e-9)
    assert abs(solve_sweep(net, [0.0], t_kelvin=300.15)[0]) < 1e-12


def test_solver_law_is_the_documented_law():
    """Open loop with A = 1 and the − input grounded, the output is the law of the input:
    linear to within KNEE_V of each limit, a parabola over the knee, flat beyond."""
    hi, lo = ASYM.v_pos_v - ASYM.headroom_v, ASYM.v_neg_v + ASYM.headroom_v
    net = Netlist("law")
    net.vin()
    net.resistor("RL", "out", "0", 1e3)
    net.opamp("U1", "in", "0", "out", a_ol=1.0, v_pos_v=ASYM.v_pos_v, v_neg_v=ASYM.v_neg_v,
              headroom_v=ASYM.headroom_v)
    d = np.concatenate([np.linspace(lo - 1, lo + 1, 201), np.linspace(hi - 1, hi + 1, 201)])
    y = solve_sweep(net, d, t_kelvin=300.15)
    by_hand = np.array([_knee_by_hand(v, hi, lo, KNEE_V) for v in d])
    np.testing.assert_allclose(y, by_hand, rtol=0, atol=1e-9)
    np.testing.assert_allclose(opamp_law(d, hi, lo), by_hand, rtol=0, atol=1e-12)
    # C1: the slope is continuous (finite differences on a fine grid change by < 1 %)
    fine = np.linspace(hi - 2 * KNEE_V, hi + 2 * KNEE_V, 4001)
    slope = np.diff(opamp_law(fine, hi, lo)) / np.diff(fine)
    assert np.max(np.abs(np.diff(slope))) < 0.01
    assert slope[0] == pytest.approx(1.0) and slope[-1] == pytest.approx(0.0)


def test_offset_voltage_times_noise_gain():
    """Vos at the output times the noise gain 1 + Rf/Rin (handbook, from memory)."""
    vos = 2e-3
    op = OpampSpec(a_ol=1e9, vos_v=vos)
    net = _stage("inverting_gain", op=op, r_in=R_IN, r_f=R_F)
    y0 = solve_sweep(net, [0.0], t_kelvin=300.15)[0]
    # sign: Vos adds to v+ − v−, so the output moves up by Vos·NG
    assert y0 == pytest.approx(vos * (1 + R_F / R_IN), rel=1e-6)


def test_bias_current_of_inverting_input_gives_plus_rf_ib():
    """Ib drawn out of the summing node flows through Rf: Vout = +Rf·Ib at 0 V in."""
    ib = 100e-9
    net = _stage("inverting_gain", op=OpampSpec(a_ol=1e9, ib_minus_a=ib), r_in=R_IN, r_f=R_F)
    assert solve_sweep(net, [0.0], t_kelvin=300.15)[0] == pytest.approx(R_F * ib, rel=1e-6)
    # the + input is grounded in this stage: its bias current changes nothing
    net = _stage("inverting_gain", op=OpampSpec(a_ol=1e9, ib_plus_a=ib), r_in=R_IN, r_f=R_F)
    assert abs(solve_sweep(net, [0.0], t_kelvin=300.15)[0]) < 1e-12


def test_output_resistance_divides_into_a_load():
    """Open loop (A = 1, follower of the input drive), Ro into RL: out = drive·RL/(RL + Ro)."""
    net = Netlist("ro")
    net.vin()
    net.resistor("RL", "out", "0", 1e3)
    net.opamp("U1", "in", "0", "out", a_ol=1.0, v_pos_v=12, v_neg_v=-12, headroom_v=1.5,
              ro_ohm=50.0)
    y = solve_sweep(net, [0.5], t_kelvin=300.15)[0]
    assert y == pytest.approx(0.5 * 1e3 / 1050.0, rel=1e-9)


def test_bias_current_limits_a_log_stage():
    """A transdiode log stage with a small reference current: the op-amp's bias current
    comes out of the junction's current, Vout = −VT·ln((Vin/R + Iref − Ib)/IS) (AN-30 form,
    REFERENCES.md, with the bias current subtracted at the summing node).  With Ib = half
    of Iref the black level moves by VT·ln 2 = 17.9 mV; with Ib above Iref + Vin/R the
    junction cannot carry the difference and the output runs to the rail."""
    t_k = 300.15
    vt = K_BOLTZMANN * t_k / Q_ELECTRON
    dev = DiodeModel(is_a=1e-14)
    r_in, i_ref, ib = 1e6, 100e-9, 50e-9
    vin = np.array([0.0, 1e-3, 1e-2, 0.1])
    ideal = solve_sweep(_stage("log_transdiode", dev, op=OpampSpec(a_ol=1e9), r_in=r_in,
                               i_ref=i_ref), vin, t_kelvin=t_k)
    real = solve_sweep(_stage("log_transdiode", dev, op=OpampSpec(a_ol=1e9, ib_minus_a=ib),
                              r_in=r_in, i_ref=i_ref), vin, t_kelvin=t_k)
    want = -vt * np.log((vin / r_in + i_ref - ib) / dev.is_a + 1.0)
    # measured: 0.21 µV (the size GMIN, 1e-12 S across the junction, gives at 50 nA); bound 1 µV
    np.testing.assert_allclose(real, want, rtol=0, atol=1e-6)
    assert real[0] - ideal[0] == pytest.approx(vt * math.log(2.0), abs=1e-6)
    # bias current above the reference: black cannot be logged, the output saturates
    starved = solve_sweep(_stage("log_transdiode", dev, op=OpampSpec(a_ol=1e9, ib_minus_a=2e-7),
                                 r_in=r_in, i_ref=i_ref), [0.0], t_kelvin=t_k)[0]
    assert starved == pytest.approx(OpampSpec().v_pos_v - OpampSpec().headroom_v, abs=1e-6)


def _hand_deck(data, vos, ibn, ro):
    """The inverting stage with a real op-amp, written by hand for ngspice: a linear
    VCVS for the open-loop gain (the stage stays inside its swing), a current source for
    the bias current and a resistor for the output resistance."""
    return "\n".join([
        "* inverting stage, real op-amp, by hand",
        "VIN in 0 DC 0",
        f"RIN in sum {R_IN}", f"RF sum out {R_F}",
        f"IBN sum 0 DC {ibn}",
        f"VOS p 0 DC {vos}",
        f"EOA oi 0 p sum {ASYM.a_ol}",
        f"RO oi out {ro}",
        "RL out 0 2k",
        ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16",
        ".dc VIN -0.5 0.5 0.05",
        ".control", "set wr_singlescale", "set wr_vecnames", "run",
        f"wrdata {data} v(out)", "quit", ".endc", ".end", ""])


def test_real_opamp_matches_hand_deck_and_exported_deck(ngspice, tmp_path):
    """The same stage three ways: our solver, ngspice on a hand-written deck, ngspice on
    our exported deck (which carries the limiting law, Vos, Ib and Ro)."""
    vos, ibn, ro = 1.5e-3, 200e-9, 75.0
    op = OpampSpec(a_ol=ASYM.a_ol, v_pos_v=12.0, v_neg_v=-5.0, headroom_v=1.5, vos_v=vos,
                   ib_minus_a=ibn, ro_ohm=ro)
    net = _stage("inverting_gain", op=op, r_in=R_IN, r_f=R_F)
    net.resistor("RL", "out", "0", 2e3)
    vin = np.linspace(-0.5, 0.5, 21)
    ours = solve_sweep(net, vin, t_kelvin=300.15)
    run_ngspice(ngspice, _hand_deck(tmp_path / "hand.dat", vos, ibn, ro), tmp_path / "hand.cir")
    hand = np.loadtxt(tmp_path / "hand.dat", skiprows=1, ndmin=2)[:, 1]
    # measured: 4.4 nV against both decks; bound 1 µV
    np.testing.assert_allclose(ours, hand, rtol=0, atol=1e-6)
    exported = ngspice_stage_sweep(ngspice, net, vin, 300.15, tmp_path, tag="exp")
    np.testing.assert_allclose(ours, exported, rtol=0, atol=1e-6)
    text = stage_deck(net, vin, t_kelvin=300.15, data_file="x.dat")
    assert check_deck(text) == text and "max(" in text and "IBN" in text


def test_exported_law_matches_solver_through_the_knee(ngspice, tmp_path):
    """ngspice on the exported B-source law, swept through both knees and into both limits."""
    net = Netlist("knee")
    net.vin()
    net.resistor("RL", "out", "0", 1e3)
    net.opamp("U1", "in", "0", "out", a_ol=10.0, v_pos_v=12.0, v_neg_v=-5.0, headroom_v=1.5)
    vin = np.linspace(-0.45, 1.15, 161)  # drive −4.5 … 11.5 V: both knees, both limits
    ours = solve_sweep(net, vin, t_kelvin=300.15)
    ref = ngspice_stage_sweep(ngspice, net, vin, 300.15, tmp_path, tag="knee")
    # measured: 4e-15 V; bound 1 nV
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-9)
    assert ours.max() == pytest.approx(10.5) and ours.min() == pytest.approx(-3.5)


# ---- chain files: [opamp] keys, [stage.opamp] override, values parsed once -----------------
NET_CHAIN = {
    "title": "t", "space": "rgb",
    "opamp": {"a_ol": "100k", "vos": "1mV", "ib_minus": "10nA", "ro": "20", "gbw": "50MHz"},
    "stage": [{"id": "a", "kind": "netlist", "channels": [0],
               "elements": ["RIN in sum 1k", "RF sum out 2k", "U1 0 sum out"]},
              {"id": "b", "kind": "inverting_gain", "channels": [1], "r_in": "1k", "r_f": "1k",
               "opamp": {"vos": "-2mV", "gbw": "10MHz"}}],
    "live": {"gain": {"target": "a.RF", "min": "1k", "max": "4k"}},
}


def test_opamp_keys_reach_the_netlist_and_stage_override_wins():
    from livecurve.circuit.chain import ChainModel
    from livecurve.config.chainfile import parse_chain
    spec = parse_chain(NET_CHAIN)
    assert spec.opamp == OpampSpec(a_ol=1e5, vos_v=1e-3, ib_minus_a=10e-9, ro_ohm=20.0,
                                   gbw_hz=50e6)
    assert spec.stages[0].opamp is None
    assert spec.stages[1].opamp == OpampSpec(a_ol=1e5, vos_v=-2e-3, ib_minus_a=10e-9,
                                             ro_ohm=20.0, gbw_hz=10e6)
    m = ChainModel(spec)
    ua = next(e for e in m.netlist(0, spec.stages[0]).elements if e.kind == "OA")
    ub = next(e for e in m.netlist(1, spec.stages[1]).elements if e.kind == "OA")
    assert (ua.extra["vos"], ua.extra["gbw"], ub.extra["vos"], ub.extra["gbw"]) == \
        (1e-3, 50e6, -2e-3, 10e6)


@pytest.mark.parametrize("table, key", [({"a_ol": 1e5, "ibias": "1nA"}, "opamp.ibias"),
                                        ({"gbw": "-5MHz"}, "opamp.gbw"),
                                        ({"ro": "-1"}, "opamp.ro")])
def test_bad_opamp_keys_are_refused_by_name(table, key):
    from livecurve.config.chainfile import parse_chain
    from livecurve.errors import ConfigError
    with pytest.raises(ConfigError, match=key.replace(".", r"\.")):
        parse_chain({**NET_CHAIN, "opamp": table})


def test_rebuilding_tables_parses_no_value_text(monkeypatch):
    """Values are parsed when the chain is read; turning a knob on a netlist element and
    rebuilding the tables parses no text again (issue: parse every value once)."""
    import livecurve.circuit.userdeck as ud
    import livecurve.config.chainfile as cf
    from livecurve.config.chainfile import parse_chain
    from livecurve.engine.pipeline import FrameEngine
    spec = parse_chain(NET_CHAIN)
    eng = FrameEngine(spec)

    def refuse(*a, **k):
        raise AssertionError("parse_value called during a rebuild")
    monkeypatch.setattr(ud, "parse_value", refuse)
    monkeypatch.setattr(cf, "parse_value", refuse)
    eng.state.live["gain"] = 3e3
    eng.rebuild()
    after = eng.model.transfer(0, [0.1], live={"gain": 3e3})[0]
    # −(Rf/Rin)·Vin + Vos·(1 + Rf/Rin) + Rf·Ib (handbook forms above; A = 1e5 moves it 4e-5)
    assert after == pytest.approx(-3.0 * 0.1 + 1e-3 * 4.0 + 3e3 * 10e-9, rel=1e-4)


def test_exported_chain_with_c_l_and_real_opamp_matches_ngspice(ngspice, tmp_path):
    """A chain whose netlist stage has C and L cards and whose op-amp has every real-part
    parameter: the exported deck (C/L cards, B-source law, bias-current and Ro cards) runs
    in ngspice and its DC sweep is the solver's (capacitors open, inductors shorts)."""
    from livecurve.circuit.chain import ChainModel
    from livecurve.config.chainfile import parse_chain
    from tests.circuit._spice_run import SPICE_TOL_V, ngspice_chain_sweep
    spec = parse_chain({
        "title": "reactive", "space": "rgb",
        "supply": {"v_pos": "12V", "v_neg": "-5V"},
        "opamp": {"a_ol": "20k", "vos": "1mV", "ib_minus": "100nA", "ib_plus": "80nA",
                  "ro": "40", "gbw": "80MHz"},
        "stage": [{"id": "s", "kind": "netlist",
                   "elements": ["RIN in sum 2k", "RF sum o 9k1", "CF sum o 4p7",
                                "U1 0 sum o", "RS o y 10", "L1 y out 1u", "C1 out 0 100p",
                                "RL out 0 1k"]}]})
    m = ChainModel(spec)
    vin_ref, ref = ngspice_chain_sweep(ngspice, m, 41, None, tmp_path, tag="reactive")
    ours = m.transfer_all(vin_ref)
    # measured: 5 nV; bound the suite's 0.1 mV for every exported deck
    assert np.max(np.abs(ours - ref)) <= SPICE_TOL_V
    assert np.ptp(ref[0]) > 1.0  # the stage has gain (about −4.5 into the divider)
