"""Hypothesis strategies: stages of every kind with component values drawn from sane
ranges, each with the input range over which it conducts and the sign of its slope.

Ranges are common practice for discrete op-amp stages: resistors 1 kΩ … 100 kΩ (log
uniform), junction saturation currents 1e-17 … 1e-9 A, emission coefficients 1 … 2,
reference voltages ±2 V, ±12 V rails.
"""

from __future__ import annotations

from dataclasses import dataclass

import hypothesis.strategies as st

from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.netlist import Netlist
from livecurve.circuit.stages import KINDS, OpampSpec, build_stage

OP = OpampSpec()


@dataclass
class RandomStage:
    """A drawn stage: its netlist, input range (volts) and slope sign (+1 / −1)."""

    kind: str
    net: Netlist
    lo_v: float
    hi_v: float
    sign: int
    params: dict


def _logu(lo, hi):
    """Log-uniform float on [lo, hi]."""
    import math
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0 ** e)


ohms = _logu(1e3, 1e5)


@st.composite
def diodes(draw):
    return DiodeModel(is_a=draw(_logu(1e-15, 1e-9)), n=draw(st.floats(1.0, 2.0)),
                      rs_ohm=draw(st.sampled_from([0.0, 0.5, 5.0, 20.0])))


@st.composite
def bjts(draw, polarity):
    return BjtModel(polarity, is_a=draw(_logu(1e-17, 1e-13)), bf=draw(st.floats(30.0, 400.0)),
                    nf=draw(st.floats(1.0, 1.2)), xtb=draw(st.floats(0.0, 2.0)),
                    re_ohm=draw(st.sampled_from([0.0, 1.0, 10.0])))


@st.composite
def junctions(draw, allowed="diode|npn|pnp"):
    kind = draw(st.sampled_from(allowed.split("|")))
    return draw(diodes()) if kind == "diode" else draw(bjts(kind))


def _params(kind, **given):
    return {p.name: given.get(p.name, p.default) for p in KINDS[kind].params}


def _divider(draw):
    return {"v_ref": draw(st.floats(1.0, 12.0)), "trim": draw(st.floats(0.0, 1.0)),
            "r_pot": draw(_logu(1e3, 1e5)), "r_end": draw(_logu(100.0, 1e4))}


@st.composite
def stages(draw, kind):
    """A RandomStage of *kind* whose output stays inside the rails over its input range."""
    if kind == "inverting_gain":
        r_in = draw(ohms)
        r_f = r_in * draw(st.floats(0.1, 5.0))
        p = _params(kind, r_in=r_in, r_f=r_f, **_divider(draw),
                    r_off=draw(st.just(0.0) | _logu(5.0, 50.0).map(lambda k: k * r_f)))
        return RandomStage(kind, build_stage(kind, p, None, OP, name=kind), -0.5, 0.5, -1, p)
    if kind == "noninverting_gain":
        r_g = draw(ohms)
        p = _params(kind, r_g=r_g, r_f=r_g * draw(st.floats(0.1, 5.0)), **_divider(draw))
        p["v_ref"] = min(p["v_ref"], 1.0)  # keep (Rf/Rg)·Vtap inside the rails
        return RandomStage(kind, build_stage(kind, p, None, OP, name=kind), -0.5, 0.5, +1, p)
    if kind == "log_transdiode":
        dev = draw(junctions())
        r_in = draw(ohms)
        # the junction conducts over the whole sweep: |Iref| above the input current's swing
        i_ref = (0.5 / r_in) * draw(st.floats(1.2, 5.0))
        if getattr(dev, "polarity", "") == "pnp":
            i_ref = -i_ref  # a PNP transdiode takes current out of the summing node
        p = _params(kind, r_in=r_in, i_ref=i_ref)
        return RandomStage(kind, build_stage(kind, p, dev, OP, name=kind), -0.5, 0.5, -1, p)
    if kind == "log_bipolar":
        dev = draw(junctions())
        r_in = draw(ohms)
        p = _params(kind, r_in=r_in, r_f=draw(st.just(0.0) | _logu(1.0, 100.0).map(
            lambda k: k * r_in)))
        return RandomStage(kind, build_stage(kind, p, dev, OP, name=kind), -0.5, 0.5, -1, p)
    if kind == "soft_limiter":
        r_in = draw(ohms)
        p = _params(kind, r_in=r_in, r_f=r_in * draw(st.floats(0.5, 10.0)), r_k=draw(ohms))
        return RandomStage(kind, build_stage(kind, p, draw(diodes()), OP, name=kind),
                           -0.5, 0.5, -1, p)
    if kind == "breakpoint_shaper":
        r_in = draw(ohms)
        p = _params(kind, r_in=r_in, r_f=r_in * draw(st.floats(0.2, 3.0)))
        legs = [{"r_series": draw(ohms), "r_bias": draw(ohms), "v_bias": draw(st.floats(-2, 2)),
                 "direction": draw(st.sampled_from(["rising", "falling"]))}
                for _ in range(draw(st.integers(1, 3)))]
        p["legs"] = legs
        return RandomStage(kind, build_stage(kind, p, draw(diodes()), OP, legs, name=kind),
                           -0.6, 0.6, -1, p)
    if kind == "antilog":
        dev = draw(junctions())
        r_f = draw(_logu(100.0, 1e5))
        att = draw(st.just(1.0) | st.floats(2.0, 20.0))
        p = _params(kind, r_f=r_f)
        if att > 1.0:
            p["r_att_bottom"] = draw(_logu(100.0, 1e3))
            p["r_att_top"] = p["r_att_bottom"] * (att - 1.0)
        # junction voltage range 0.2 … 0.75 V times the attenuation (loading shifts it a
        # little); an NPN antilog takes the negative sign of input
        lo, hi = 0.2 * att, 0.75 * att
        if getattr(dev, "polarity", "") == "npn":
            lo, hi = -hi, -lo
        return RandomStage(kind, build_stage(kind, p, dev, OP, name=kind), lo, hi, -1, p)
    raise ValueError(kind)
