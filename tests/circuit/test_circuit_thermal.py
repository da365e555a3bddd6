"""Thermal model: warm-up profile, self-heating, and the table follower.

References
----------
* First-order warm-up T(t) = T0 + (T1 − T0)(1 − e^(−t/τ)): the step response of one thermal
  RC (Newton's law of cooling; any heat-transfer text).
* Transdiode: the summing node is a virtual ground, so the feedback junction carries the
  input current I = Vin/Rin (TI/National AN-30; ADI MT-077).
* Shockley law V = n·VT·ln(I/IS + 1), VT = kT/q, and the SPICE level-1 IS(T) law
  IS(T) = IS·exp[(T/Tnom − 1)·EG/(N·VT) + (XTI/N)·ln(T/Tnom)] (Berkeley SPICE / ngspice;
  REFERENCES.md).  Written out here from those formulas, not taken from livecurve.
* Self-heating: T_j = T_a + Rth·P (definition of junction-to-ambient thermal resistance).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from livecurve.circuit.thermal import TableFollower, ThermalModel, warmup_ambient_k
from livecurve.config.chainfile import parse_chain
from livecurve.engine.pipeline import FrameEngine
from livecurve.errors import ConfigError, SolverError

K_B = 1.38064852e-23  # CODATA 2014 (as ngspice 39)
Q_E = 1.6021766208e-19
T_NOM = 300.15


def _vt(t):
    return K_B * t / Q_E


def _is_diode(is0, t, eg=1.11, xti=3.0, n=1.0):
    """SPICE level-1 diode IS(T) (REFERENCES.md)."""
    r = t / T_NOM
    return is0 * math.exp((r - 1) * eg / (n * _vt(t)) + xti / n * math.log(r))


def _is_bjt(is0, t, eg=1.11, xti=3.0):
    """SPICE Gummel–Poon IS(T), no division by NF (REFERENCES.md)."""
    r = t / T_NOM
    return is0 * math.exp((r - 1) * eg / _vt(t) + xti * math.log(r))


def _chain(stage: dict, **top) -> object:
    raw = {"space": "rgb", "ambient": "25C", "stage": [stage],
           "sweep": {"from": "0.01V", "to": "1V"}, **top}
    return parse_chain(raw, path="test.toml")


LOG_DIODE = {"id": "lg", "kind": "log_transdiode", "r_in": "10k", "junction": "diode",
             "rth": "2000K/W", "device": {"is": "1e-14"}}


def test_warmup_follows_first_order_law():
    spec = _chain(LOG_DIODE, thermal={"warmup_to": "45C", "tau": "600s"})
    tm = ThermalModel(spec)
    t0, t1, tau = 298.15, 318.15, 600.0
    for t_s in (0.0, 60.0, 600.0, 1800.0, 6000.0):
        want = t0 + (t1 - t0) * (1 - math.exp(-t_s / tau))  # first-order step response
        assert tm.ambient_at(t_s) == pytest.approx(want, abs=1e-9)
    assert warmup_ambient_k(600.0, t0_k=t0, t1_k=t1, tau_s=tau) == pytest.approx(
        t0 + 20 * (1 - math.exp(-1)), abs=1e-12)
    amb = [tm.ambient_at(t) for t in np.linspace(0, 3000, 31)]
    assert np.all(np.diff(amb) > 0)


def test_constant_ambient_without_thermal_table():
    spec = _chain({**LOG_DIODE, "rth": "0"})
    amb, temps = ThermalModel(spec).temps_at(1234.0, signal_v=0.5)
    assert amb == pytest.approx(298.15)
    assert temps == {"lg": amb}  # no rth: junction at the ambient, exactly


def test_warmup_without_tau_is_refused():
    spec = _chain(LOG_DIODE, thermal={"warmup_to": "45C"})
    with pytest.raises(ConfigError, match="thermal.tau"):
        ThermalModel(spec)


def test_negative_time_refused():
    with pytest.raises(ConfigError, match="t_s"):
        ThermalModel(_chain(LOG_DIODE)).temps_at(-1.0)


@pytest.mark.parametrize("vin", [0.2, 1.0])
def test_self_heating_of_a_diode_transdiode(vin):
    # I = Vin/Rin through the feedback diode (virtual ground, AN-30); P = I·V with V from the
    # Shockley law at the junction temperature; Tj = Ta + Rth·P.  Solve that fixed point here.
    rth, ta, i = 2000.0, 298.15, vin / 10e3
    tj = ta
    for _ in range(50):
        v = _vt(tj) * math.log(i / _is_diode(1e-14, tj) + 1)
        tj = ta + rth * i * v
    amb, temps = ThermalModel(_chain(LOG_DIODE)).temps_at(0.0, signal_v=vin)
    assert amb == ta
    assert temps["lg"] - ta == pytest.approx(tj - ta, rel=2e-3)
    assert temps["lg"] - ta > 0.01  # the effect is really there (≈ 0.02–0.12 K)


def test_self_heating_of_a_grounded_base_transistor():
    # Grounded-base NPN in the feedback: IC = Iin, IB = IC/β, VCE = VBE (collector at the
    # virtual ground, emitter at the output, base grounded): P = VBE·IC·(1 + 1/β).
    stage = {"id": "lg", "kind": "log_transdiode", "r_in": "10k", "junction": "npn",
             "rth": "3000K/W", "device": {"is": "1e-15", "bf": 50}}
    rth, ta, i, beta = 3000.0, 298.15, 0.5 / 10e3, 50.0
    tj = ta
    for _ in range(50):
        vbe = _vt(tj) * math.log(i / _is_bjt(1e-15, tj) + 1)
        tj = ta + rth * vbe * i * (1 + 1 / beta)
    _, temps = ThermalModel(_chain(stage)).temps_at(0.0, signal_v=0.5)
    assert temps["lg"] - ta == pytest.approx(tj - ta, rel=2e-3)


def test_thermal_runaway_is_reported():
    # A junction driven by a voltage: its current grows ≈ 8 %/K with temperature, so with a
    # large Rth the heating feeds itself.
    stage = {"id": "hot", "kind": "netlist", "rth": "20000K/W",
             "elements": ["VB b 0 0.66", "D1 b x dm", "R1 x 0 0.5", "R2 in out 1k",
                          "R3 out 0 1k"],
             "models": {"dm": {"type": "diode", "is": "1e-14"}}}
    with pytest.raises(SolverError, match="runaway"):
        ThermalModel(_chain(stage)).temps_at(0.0)
    # the same circuit on a good heat sink settles a few mK above ambient
    _, temps = ThermalModel(_chain({**stage, "rth": "10K/W"})).temps_at(0.0)
    assert 0.001 < temps["hot"] - 298.15 < 0.1


def _frame(h=8, w=16):
    return np.linspace(-0.3, 0.3, 3 * h * w, dtype=np.float32).reshape(3, h, w)


def test_follower_rebuilds_only_past_threshold():
    spec = _chain({**LOG_DIODE, "rth": "0"}, thermal={"warmup_to": "45C", "tau": "100s"},
                  ambient="25C")
    tm = ThermalModel(spec)
    eng = FrameEngine(spec)
    f = TableFollower(tm, threshold_k=0.25)
    assert not f.maybe_update(eng, 0.0)
    # 20 K·(1 − e^(−t/100)) passes 0.25 K at t = 1.258 s
    assert not f.maybe_update(eng, 1.2)
    assert f.maybe_update(eng, 1.3)
    assert eng.state.t_kelvin == pytest.approx(tm.ambient_at(1.3))
    assert not f.maybe_update(eng, 1.31)
    assert f.maybe_update(eng, 60.0) and f.rebuilds == 2
    # the rebuilt engine equals one built at that temperature from scratch
    fresh = FrameEngine(spec, t_kelvin=tm.ambient_at(60.0))
    np.testing.assert_array_equal(eng.process(_frame()), fresh.process(_frame()))


def test_follower_speedup_scales_time():
    spec = _chain({**LOG_DIODE, "rth": "0"}, thermal={"warmup_to": "45C", "tau": "100s"})
    tm = ThermalModel(spec)
    e1, e2 = FrameEngine(spec), FrameEngine(spec)
    assert TableFollower(tm, speedup=20).maybe_update(e1, 3.0)
    assert TableFollower(tm).maybe_update(e2, 60.0)
    assert e1.state.t_kelvin == pytest.approx(e2.state.t_kelvin)


def test_follower_passes_self_heated_stage_temperatures():
    spec = _chain({**LOG_DIODE, "rth": "200000K/W"})
    tm = ThermalModel(spec)
    eng = FrameEngine(spec)
    f = TableFollower(tm, signal_v=1.0)
    assert f.maybe_update(eng, 0.0)  # 100 µA · 0.6 V · 2e5 K/W ≈ 11 K above ambient
    _, temps = tm.temps_at(0.0, signal_v=1.0)
    assert eng.state.temps_k["lg"] == pytest.approx(temps["lg"])
    assert temps["lg"] - 298.15 > 5


@pytest.mark.parametrize("kw", [{"threshold_k": 0.0}, {"threshold_k": float("nan")},
                                {"speedup": -1.0}])
def test_follower_bad_settings(kw):
    with pytest.raises(ConfigError):
        TableFollower(ThermalModel(_chain(LOG_DIODE)), **kw)
