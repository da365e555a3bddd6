"""Every formula and default docs/chain-files.md states is the solver's (a promise in the
docs is a test).  Each check quotes the docs text it holds to, so an edit of either side
shows up here.  Stages run with a near-ideal op-amp (A = 1e9) unless the formula is about
the op-amp itself.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from livecurve.circuit.devices import T_NOM_K, BjtModel, DiodeModel, thermal_voltage
from livecurve.circuit.netlist import KNEE_V, solve_sweep
from livecurve.circuit.stages import KINDS, OpampSpec, build_stage

DOCS = (Path(__file__).resolve().parents[2] / "docs" / "chain-files.md").read_text()
IDEAL = OpampSpec(a_ol=1e9)
T_K = 300.15


def _stage(kind, device=None, **given):
    params = {p.name: given.get(p.name, p.default) for p in KINDS[kind].params}
    return build_stage(kind, params, device, IDEAL, name=kind)


def _says(text: str) -> None:
    assert text in DOCS, f"docs/chain-files.md no longer says: {text}"


@pytest.mark.parametrize("dev", [DiodeModel(is_a=1e-14), BjtModel("pnp", is_a=1e-15, bf=80)],
                         ids=["diode", "pnp"])
def test_antilog_formula_diode_and_pnp(dev):
    _says("diode/pnp: Vout = −Rf·IS·exp(Vin/(n·VT)) + Rf·i_bias")
    rf, ib = 1e3, 5e-6
    vin = np.linspace(0.45, 0.65, 9)
    y = solve_sweep(_stage("antilog", dev, r_f=rf, i_bias=ib), vin, t_kelvin=T_K)
    n = dev.n if isinstance(dev, DiodeModel) else dev.nf
    # an ideal op-amp holds the summing node at 0 V: the junction sees Vin exactly
    want = -rf * dev.is_a * np.expm1(vin / (n * thermal_voltage(T_K))) + rf * ib
    # measured: 3.4e-7 relative (diode: GMIN across the junction), 1e-9 (pnp: A = 1e9);
    # bound 1e-6
    np.testing.assert_allclose(y, want, rtol=1e-6, atol=1e-9)


def test_antilog_formula_npn_flips_both_signs():
    _says("npn: Vout = +Rf·IS·exp(−Vin/(n·VT)) + Rf·i_bias")
    dev = BjtModel("npn", is_a=1e-16, bf=100)
    rf, ib = 10e3, 2e-6
    vin = np.linspace(-0.70, -0.50, 9)
    y = solve_sweep(_stage("antilog", dev, r_f=rf, i_bias=ib), vin, t_kelvin=T_K)
    want = rf * dev.is_a * np.expm1(-vin / thermal_voltage(T_K)) + rf * ib
    # measured: 1e-9 relative (A = 1e9); bound 1e-6
    np.testing.assert_allclose(y, want, rtol=1e-6, atol=1e-9)


def test_i_bias_is_drawn_out_of_the_summing_node():
    _says("`i_bias` is drawn out of the summing node")
    dev = DiodeModel()
    base = solve_sweep(_stage("antilog", dev, r_f=1e3), [0.3], t_kelvin=T_K)[0]
    with_ib = solve_sweep(_stage("antilog", dev, r_f=1e3, i_bias=10e-6), [0.3], t_kelvin=T_K)[0]
    assert with_ib - base == pytest.approx(1e3 * 10e-6, rel=1e-6)


@pytest.mark.parametrize("trim", [0.1, 0.5, 0.93])
def test_noninverting_gain_counts_the_pot_source_resistance(trim):
    _says("Vout = (1 + Rf/(Rg + Rs))·Vin − (Rf/(Rg + Rs))·Vtap")
    rg, rf, v, r_pot, r_end = 2e3, 6e3, 1.0, 10e3, 1e3
    net = _stage("noninverting_gain", r_g=rg, r_f=rf, v_ref=v, r_pot=r_pot, r_end=r_end,
                 trim=trim)
    vin = np.linspace(-0.4, 0.4, 9)
    y = solve_sweep(net, vin, t_kelvin=T_K)
    r_hi, r_lo = r_end + r_pot * (1 - trim), r_end + r_pot * trim
    vtap = v * (r_lo - r_hi) / (r_hi + r_lo)          # open-circuit wiper voltage
    rs = r_hi * r_lo / (r_hi + r_lo)                  # the pot's source resistance
    want = (1 + rf / (rg + rs)) * vin - rf / (rg + rs) * vtap
    # measured: 6.4 nV worst (A = 1e9); bound 0.1 µV
    np.testing.assert_allclose(y, want, rtol=0, atol=1e-7)
    # the formula without Rs is a different slope (by a quarter or more here)
    assert abs((1 + rf / rg) / (1 + rf / (rg + rs)) - 1) > 0.2


def test_log_transdiode_formula():
    _says("Vout ≈ −n·VT·ln((Vin/Rin + Iref)/IS)")
    dev = DiodeModel(is_a=1e-14, n=1.0)
    vin = np.array([0.0, 0.01, 0.1, 0.5])
    y = solve_sweep(_stage("log_transdiode", dev, r_in=10e3, i_ref=10e-6), vin, t_kelvin=T_K)
    want = -thermal_voltage(T_K) * np.log((vin / 10e3 + 10e-6) / 1e-14 + 1.0)
    # measured: 2 nV; bound 0.1 µV
    np.testing.assert_allclose(y, want, rtol=0, atol=1e-7)


def _doc_defaults(table_tag: str) -> dict:
    """``| tag | key | value |`` rows of the docs' defaults table."""
    rows = re.findall(rf"^\| {table_tag} \| `(\w+)` \| ([^|]+?) \|", DOCS, flags=re.M)
    assert rows, table_tag
    return {k: (None if v.startswith("none") else float(v.split()[0])) for k, v in rows}


def test_documented_device_defaults_are_the_models():
    _says("TNOM = 27 °C")
    assert T_NOM_K == 300.15  # SPICE default TNOM (REFERENCES.md)
    d = _doc_defaults("diode")
    m = DiodeModel()
    assert d == {"is": m.is_a, "n": m.n, "rs": m.rs_ohm, "eg": m.eg_ev, "xti": m.xti}
    b = _doc_defaults("npn/pnp")
    q = BjtModel()
    assert b == {"is": q.is_a, "bf": q.bf, "br": q.br, "nf": q.nf, "nr": q.nr, "eg": q.eg_ev,
                 "xti": q.xti, "xtb": q.xtb, "re": q.re_ohm, "rb": q.rb_ohm, "rc": q.rc_ohm}


def test_documented_opamp_defaults_and_knee():
    o = _doc_defaults("opamp")
    op = OpampSpec()
    assert o == {"a_ol": op.a_ol, "headroom": op.headroom_v, "vos": op.vos_v,
                 "ib_plus": op.ib_plus_a, "ib_minus": op.ib_minus_a, "ro": op.ro_ohm,
                 "gbw": op.gbw_hz}
    _says(f"KNEE = {KNEE_V * 1e3:.0f} mV")
    _says("y = d − (d − (hi − KNEE))²/(4·KNEE)")
