"""Every stage kind and every one of its parameters against an independent reference.

References (independent of livecurve's netlist, deck writer and solver):

* ngspice 39 (Debian package ``ngspice``) run on decks written by hand in
  ``tests/circuit/_hand_decks.py`` from the schematic each kind documents
  (docs/chain-files.md), with a finite-gain VCVS op-amp (A = 2e5).
* Closed forms from the op-amp literature (any op-amp text, e.g. Franco, *Design with
  Operational Amplifiers*; from memory): finite-gain inverting and non-inverting
  amplifiers with the noise gain 1 + Rf/R, and the loaded potentiometer divider replaced
  by its Thevenin equivalent (common practice).

Each parameter of each kind gets a test that moves it and checks the solver against the
reference at the moved value; the reference output must move by far more than the
tolerance, so the parameter is really exercised.  Component values are invented test
values.
"""

from __future__ import annotations

import numpy as np
import pytest

from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.netlist import solve_sweep
from livecurve.circuit.stages import KINDS, OpampSpec, build_stage
from livecurve.circuit.userdeck import build_user_stage
from tests.circuit import _hand_decks as hand

OP = OpampSpec()  # A_ol 2e5, symmetric ±12 V rails, 1.5 V headroom
N_POINTS = 41
T_K = 300.15  # 27 °C, the SPICE TNOM
#: Largest |solver − hand deck| on any sweep point, volts.  Measured here: at most
#: 2.3 µV over every case below (the op-amp law's tanh against the reference's linear
#: gain at a few volts of output, plus ngspice's RELTOL = 1e-7); margin ×4.
TOL_V = 10e-6
#: A moved parameter must move the reference output by at least this much somewhere on
#: the sweep (100× the tolerance), so that its test exercises it.
MOVE_MIN_V = 100 * TOL_V

SOFT_DIODE = DiodeModel(is_a=4e-9, n=1.9, rs_ohm=0.6)
LEG_UP = {"r_series": 10e3, "r_bias": 10e3, "v_bias": 0.4, "direction": "rising"}
LEG_DOWN = {"r_series": 15e3, "r_bias": 10e3, "v_bias": -0.4, "direction": "falling"}

# case id -> (kind, device, legs, params, sweep from, sweep to)
CASES = {
    "inverting": ("inverting_gain", None, (),
                  dict(r_in=10e3, r_f=22e3, r_off=47e3, v_ref=10.0, r_pot=10e3, r_end=1e3,
                       trim=0.3), -0.5, 0.5),
    "noninverting": ("noninverting_gain", None, (),
                     dict(r_g=10e3, r_f=15e3, v_ref=10.0, r_pot=10e3, r_end=1e3, trim=0.62),
                     -0.5, 0.5),
    "log_diode": ("log_transdiode", DiodeModel(is_a=1e-14, n=1.05, rs_ohm=5.0), (),
                  dict(r_in=10e3, i_ref=60e-6), -0.5, 0.5),
    "log_npn": ("log_transdiode", BjtModel("npn", is_a=2e-16, bf=150, re_ohm=20.0), (),
                dict(r_in=10e3, i_ref=60e-6), -0.5, 0.5),
    "log_pnp": ("log_transdiode", BjtModel("pnp", is_a=1e-15, bf=80), (),
                dict(r_in=10e3, i_ref=-60e-6), -0.5, 0.5),
    "bipolar_diode": ("log_bipolar", DiodeModel(is_a=1e-9, n=2.0, rs_ohm=10.0), (),
                      dict(r_in=10e3, r_f=22e3), -0.5, 0.5),
    "bipolar_npn": ("log_bipolar", BjtModel("npn", is_a=1e-15, bf=120), (),
                    dict(r_in=10e3, r_f=100e3), -0.5, 0.5),
    "soft_limiter": ("soft_limiter", DiodeModel(), (),
                     dict(r_in=10e3, r_f=47e3, r_k=4.7e3), -0.5, 0.5),
    "breakpoint": ("breakpoint_shaper", SOFT_DIODE, (LEG_UP, LEG_DOWN),
                   dict(r_in=33e3, r_f=10e3), -0.6, 0.6),
    "antilog_diode": ("antilog", DiodeModel(), (), dict(r_f=1e3, i_bias=10e-6), 0.4, 0.65),
    "antilog_att": ("antilog", DiodeModel(), (),
                    dict(r_f=1e3, r_att_top=10e3, r_att_bottom=1e3), 4.4, 7.7),
    "antilog_npn": ("antilog", BjtModel("npn", is_a=1e-16, bf=100), (),
                    dict(r_f=10e3, i_bias=5e-6), -0.72, -0.45),
    "antilog_pnp_att": ("antilog", BjtModel("pnp", is_a=1e-16, bf=60), (),
                        dict(r_f=10e3, r_att_top=10e3, r_att_bottom=1e3), 4.9, 7.9),
}

# (case id, parameter, how to move it).  "x1.3" scales, "+0.2" adds; "device.NAME" is a
# junction model field; "legs.K.NAME" a break-point leg's value.
MOVES = [
    *[("inverting", p, "x1.3") for p in ("r_in", "r_f", "r_off", "r_pot", "r_end")],
    ("inverting", "v_ref", "x0.8"), ("inverting", "trim", "+0.4"),
    *[("noninverting", p, "x1.3") for p in ("r_g", "r_f", "r_pot", "r_end")],
    ("noninverting", "v_ref", "x0.8"), ("noninverting", "trim", "-0.3"),
    ("log_diode", "r_in", "x1.3"), ("log_diode", "i_ref", "x1.5"),
    ("log_diode", "device.is_a", "x3"), ("log_diode", "device.n", "x1.05"),
    ("log_diode", "device.rs_ohm", "x4"),
    ("log_npn", "r_in", "x1.3"), ("log_npn", "i_ref", "x1.5"),
    ("log_npn", "device.is_a", "x3"), ("log_npn", "device.nf", "x1.05"),
    ("log_npn", "device.re_ohm", "x4"),
    ("log_pnp", "r_in", "x1.3"), ("log_pnp", "i_ref", "x1.5"), ("log_pnp", "device.is_a", "x3"),
    ("bipolar_diode", "r_in", "x1.3"), ("bipolar_diode", "r_f", "x1.3"),
    ("bipolar_diode", "device.is_a", "x3"), ("bipolar_diode", "device.n", "x1.05"),
    ("bipolar_npn", "r_in", "x1.3"), ("bipolar_npn", "r_f", "x0.5"),
    ("bipolar_npn", "device.is_a", "x3"),
    ("soft_limiter", "r_in", "x1.3"), ("soft_limiter", "r_f", "x1.3"),
    ("soft_limiter", "r_k", "x1.5"), ("soft_limiter", "device.is_a", "x3"),
    ("soft_limiter", "device.n", "x1.1"),
    ("breakpoint", "r_in", "x1.3"), ("breakpoint", "r_f", "x1.3"),
    *[("breakpoint", f"legs.{k}.{p}", "x1.3") for k in (0, 1) for p in ("r_series", "r_bias")],
    ("breakpoint", "legs.0.v_bias", "+0.1"), ("breakpoint", "legs.1.v_bias", "-0.1"),
    ("breakpoint", "legs.1.direction", "rising"),
    ("breakpoint", "device.is_a", "x3"), ("breakpoint", "device.n", "x1.1"),
    ("antilog_diode", "r_f", "x1.3"), ("antilog_diode", "i_bias", "x3"),
    ("antilog_diode", "device.is_a", "x1.5"), ("antilog_diode", "device.n", "x1.05"),
    ("antilog_att", "r_att_top", "x1.05"), ("antilog_att", "r_att_bottom", "x1.05"),
    ("antilog_npn", "r_f", "x1.3"), ("antilog_npn", "i_bias", "x3"),
    ("antilog_npn", "device.is_a", "x3"),
    ("antilog_pnp_att", "r_att_top", "x1.05"), ("antilog_pnp_att", "r_att_bottom", "x1.05"),
    ("antilog_pnp_att", "r_f", "x1.3"),
]


def _moved(case: str, param: str | None, how: str | None):
    """(kind, device, legs, params, lo, hi) of *case* with *param* moved by *how*."""
    kind, dev, legs, params, lo, hi = CASES[case]
    params, legs = dict(params), [dict(leg) for leg in legs]
    if param is None:
        return kind, dev, legs, params, lo, hi

    def move(v):
        if how.startswith("x"):
            return v * float(how[1:])
        if how[0] in "+-":
            return v + float(how)
        return how  # a new word (leg direction)

    if param.startswith("device."):
        name = param.split(".", 1)[1]
        dev = dev.scaled(**{name: move(getattr(dev, name))})
    elif param.startswith("legs."):
        _, k, name = param.split(".")
        legs[int(k)][name] = move(legs[int(k)][name])
    else:
        params[param] = move(params[param])
    return kind, dev, legs, params, lo, hi


def _livecurve(kind, dev, legs, params, vin):
    full = {p.name: params.get(p.name, p.default) for p in KINDS[kind].params}
    net = build_stage(kind, full, dev, OP, legs, name=kind)
    return solve_sweep(net, vin, t_kelvin=T_K)


def _reference(ngspice, tmp_path, tag, kind, dev, legs, params, vin):
    full = {p.name: params.get(p.name, p.default) for p in KINDS[kind].params}
    body = hand.HAND[kind](full, dev, legs)
    return hand.run_sweep(ngspice, body, vin, T_K, tmp_path, tag)


def test_every_kind_and_parameter_is_covered():
    """Each stage kind has a case, and each of its parameters is moved by some test."""
    kinds = {CASES[c][0] for c in CASES}
    assert kinds == set(KINDS)
    for kind in KINDS:
        moved = {p for c, p, _ in MOVES if CASES[c][0] == kind}
        for prm in KINDS[kind].params:
            assert prm.name in moved, (kind, prm.name)
        if KINDS[kind].legs:
            for name in ("r_series", "r_bias", "v_bias", "direction"):
                assert any(p.endswith(name) for p in moved), (kind, name)
        if KINDS[kind].junction:
            assert any(p.startswith("device.") for p in moved), kind


@pytest.mark.parametrize("case", list(CASES))
def test_stage_matches_hand_deck(ngspice, tmp_path, case):
    kind, dev, legs, params, lo, hi = _moved(case, None, None)
    vin = np.linspace(lo, hi, N_POINTS)
    ref = _reference(ngspice, tmp_path, case, kind, dev, legs, params, vin)
    ours = _livecurve(kind, dev, legs, params, vin)
    assert np.ptp(ref) > 0.05, np.ptp(ref)  # the sweep exercises the stage
    err = np.max(np.abs(ours - ref))
    assert err <= TOL_V, f"{case}: max |Δ| = {err * 1e6:.3f} µV"


@pytest.mark.parametrize("case, param, how", MOVES, ids=[f"{c}-{p}" for c, p, _ in MOVES])
def test_moved_parameter_matches_hand_deck(ngspice, tmp_path, case, param, how):
    base = _moved(case, None, None)
    kind, dev, legs, params, lo, hi = _moved(case, param, how)
    vin = np.linspace(lo, hi, N_POINTS)
    ref0 = _reference(ngspice, tmp_path, "base", *base[:4], vin)
    ref = _reference(ngspice, tmp_path, "moved", kind, dev, legs, params, vin)
    # The move must matter on this sweep, or the test would not exercise the parameter.
    assert np.max(np.abs(ref - ref0)) > MOVE_MIN_V, (param, np.max(np.abs(ref - ref0)))
    ours = _livecurve(kind, dev, legs, params, vin)
    err = np.max(np.abs(ours - ref))
    assert err <= TOL_V, f"{case} {param} {how}: max |Δ| = {err * 1e6:.3f} µV"


# ---- the user netlist kind ---------------------------------------------------------------

USER_TEMPLATE = [
    "R1 in sum {r1}",
    "I1 0 sum {i1}",
    "Q1 sum 0 e1 qn",
    "U1 0 sum e1",
    "E1 x 0 e1 0 {e1}",
    "V1 ref 0 {v1}",
    "R2 x s2 1k",
    "R3 ref s2 1k",
    "R4 s2 out 10k",
    "U2 0 s2 out",
    "D1 s2 out dn",
]
USER_VALUES = {"r1": "10k", "i1": "50u", "e1": "1", "v1": "0.67", "qn.is_a": 1e-15,
               "dn.is_a": 1e-14}
USER_MOVES = [("r1", "13k"), ("i1", "80u"), ("e1", "1.2"), ("v1", "0.9"),
              ("qn.is_a", 3e-15), ("dn.is_a", 1e-12)]


def _user(values):
    lines = [ln.format(**values) for ln in USER_TEMPLATE]
    models = {"qn": BjtModel("npn", is_a=values["qn.is_a"], bf=120, re_ohm=1.0),
              "dn": DiodeModel(is_a=values["dn.is_a"], n=1.0, rs_ohm=2.0)}
    return lines, models


def _user_reference_body(lines, models):
    """The same element lines as SPICE text, each op-amp written as the reference VCVS."""
    body = []
    for ln in lines:
        f = ln.split()
        body.append(hand.opamp(f[0], f[1], f[2], f[3]) if f[0].startswith("U") else ln)
    body += [hand.bjt_card("qn", models["qn"]), hand.diode_card("dn", models["dn"])]
    return body


@pytest.mark.parametrize("move", [None, *USER_MOVES], ids=lambda m: "base" if m is None
                         else m[0])
def test_user_netlist_matches_hand_deck(ngspice, tmp_path, move):
    values = dict(USER_VALUES)
    if move is not None:
        values[move[0]] = move[1]
    lines, models = _user(values)
    vin = np.linspace(-0.4, 0.5, N_POINTS)
    ref = hand.run_sweep(ngspice, _user_reference_body(lines, models), vin, T_K, tmp_path,
                         "user")
    if move is not None:
        ref0 = hand.run_sweep(ngspice, _user_reference_body(*_user(USER_VALUES)), vin, T_K,
                              tmp_path, "user0")
        assert np.max(np.abs(ref - ref0)) > MOVE_MIN_V, move
    net = build_user_stage(lines, models, OP, name="netlist", key="stage.elements")
    err = np.max(np.abs(solve_sweep(net, vin, t_kelvin=T_K) - ref))
    assert err <= TOL_V, f"user netlist {move}: max |Δ| = {err * 1e6:.3f} µV"


# ---- closed forms for the linear kinds ---------------------------------------------------

def _thevenin_pot(p):
    """Loaded pot divider as a Thevenin source (common practice): wiper volts and ohms."""
    upper = p["r_end"] + p["r_pot"] * (1 - p["trim"])
    lower = p["r_end"] + p["r_pot"] * p["trim"]
    v_th = -p["v_ref"] + 2 * p["v_ref"] * lower / (upper + lower)
    return v_th, upper * lower / (upper + lower)


def _closed_inverting(p, vin):
    """Finite-gain summing inverter: Vout = −Rf·Σ(Vk/Rk) / (1 + NG/A), NG = 1 + Rf·Σ(1/Rk)
    (any op-amp text, from memory), with the pot's Thevenin resistance in series with Roff."""
    v_th, r_th = _thevenin_pot(p)
    r_o = p["r_off"] + r_th
    ng = 1 + p["r_f"] / p["r_in"] + p["r_f"] / r_o
    return -p["r_f"] * (vin / p["r_in"] + v_th / r_o) / (1 + ng / hand.A_OL)


def _closed_noninverting(p, vin):
    """Finite-gain non-inverting stage with Rg returned to a source Vth (superposition):
    Vout = [(1 + Rf/Rg′)·Vin − (Rf/Rg′)·Vth] / (1 + NG/A), Rg′ = Rg + Rth, NG = 1 + Rf/Rg′
    (any op-amp text, from memory)."""
    v_th, r_th = _thevenin_pot(p)
    rg = p["r_g"] + r_th
    ng = 1 + p["r_f"] / rg
    return (ng * vin - p["r_f"] / rg * v_th) / (1 + ng / hand.A_OL)


LINEAR = [(c, None, None) for c in ("inverting", "noninverting")] + [
    m for m in MOVES if m[0] in ("inverting", "noninverting")]


@pytest.mark.parametrize("case, param, how", LINEAR, ids=[f"{c}-{p}" for c, p, _ in LINEAR])
def test_linear_kinds_match_closed_form(case, param, how):
    kind, dev, legs, params, lo, hi = _moved(case, param, how)
    full = {p.name: params.get(p.name, p.default) for p in KINDS[kind].params}
    vin = np.linspace(lo, hi, N_POINTS)
    want = (_closed_inverting if case == "inverting" else _closed_noninverting)(full, vin)
    # Same bound as the decks: the closed form's op-amp is linear (A·vd), ours eases into
    # its swing; measured ≤ 3.7 µV at these outputs of up to 4.6 V.
    err = np.max(np.abs(_livecurve(kind, dev, legs, params, vin) - want))
    assert err <= TOL_V, f"{case} {param}: max |Δ| = {err * 1e6:.3f} µV"


@pytest.mark.parametrize("trim", [0.0, 1.0])
def test_pot_end_stops_limit_the_offset(trim):
    """At either end of the pot the wiper still sits r_end from its reference: the offset
    is the loaded divider's Thevenin voltage through Roff (closed form above)."""
    p = {p.name: p.default for p in KINDS["inverting_gain"].params}
    p.update(r_in=10e3, r_f=2.2e3, r_off=10e3, trim=trim)
    vin = np.zeros(1)
    want = _closed_inverting(p, vin)
    # ±10 V reference, 1k end-stops, 10k pot: the wiper stops at ±(10 − 20/12) V.
    assert abs(want[0]) == pytest.approx(2.2e3 / (10e3 + 1e3 * 11 / 12) * (10 - 20 / 12),
                                         rel=1e-4)
    got = _livecurve("inverting_gain", None, (), p, vin)
    assert abs(got[0] - want[0]) <= TOL_V, (got[0], want[0])
