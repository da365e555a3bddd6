"""The stage library: textbook op-amp building blocks emitting small netlists.

Each stage kind is a function of component values (SI floats) that builds a
:class:`~livecurve.circuit.netlist.Netlist` with input node ``in`` and output node
``out``.  The forms are the usual published ones:

* ``inverting_gain`` — Vout = −(Rf/Rin)·Vin + offset; the offset comes from a
  potentiometer (with end-stop resistors) across ±Vref feeding the summing node
  through Roff (any op-amp text).
* ``noninverting_gain`` — Vout = (1 + Rf/Rg)·Vin − (Rf/Rg)·Vtap, Rg returned to the
  same reference divider's tap instead of ground.
* ``log_transdiode`` — junction (diode, or NPN with grounded base) in the feedback
  path; a reference current into the summing node sets the knee:
  Vout ≈ −n·VT·ln((Vin/Rin + Iref)/IS) (TI/National AN-30; ADI MT-077).
* ``log_bipolar`` — anti-parallel junctions in feedback (optionally with a parallel
  Rf setting the small-signal gain) so both signs compress: Vout ≈ −n·VT·asinh(Vin/(2·Rin·IS)).
* ``soft_limiter`` — inverting stage whose feedback has two legs of junction plus
  resistor, one per polarity: the slope eases from −Rf/Rin to −(Rf‖Rk)/Rin.
* ``breakpoint_shaper`` — diode function generator: legs of series resistor, bias
  resistor to a reference voltage and a junction into the summing node, each switching
  in at its own break-point (classic analog function generation, e.g. Korn & Korn).
* ``antilog`` — junction at the input, Rf in feedback: Vout ≈ −Rf·IS·exp(Vin/(n·VT)),
  optionally after an attenuator Ra/Rb.
* ``netlist`` — any topology written as SPICE-like element lines (see
  :mod:`livecurve.circuit.userdeck`).

All kinds share the chain's op-amp (open-loop gain, rails, headroom).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.netlist import Netlist
from livecurve.errors import ConfigError


@dataclass(frozen=True)
class OpampSpec:
    """The op-amp a stage uses.

    Attributes
    ----------
    a_ol : float
        Open-loop DC gain (> 1).
    v_pos_v, v_neg_v : float
        Supply rails, volts.
    headroom_v : float
        The output swings to within this of each rail, volts.
    vos_v : float
        Input offset voltage, volts (added to v+ − v−; default 0).
    ib_plus_a, ib_minus_a : float
        Input bias currents drawn out of the + and − input nodes, amps (default 0).
    ro_ohm : float
        Open-loop output resistance, ohms (default 0).
    gbw_hz : float or None
        Gain-bandwidth product, Hz: a single pole at gbw/a_ol in the schematic's
        small-signal dynamics (None: no pole, the op-amp is as fast as its circuit).
    """

    a_ol: float = 2e5
    v_pos_v: float = 12.0
    v_neg_v: float = -12.0
    headroom_v: float = 1.5
    vos_v: float = 0.0
    ib_plus_a: float = 0.0
    ib_minus_a: float = 0.0
    ro_ohm: float = 0.0
    gbw_hz: float | None = None

    def element_kw(self) -> dict:
        """Keyword arguments of :meth:`Netlist.opamp` for this op-amp."""
        return {"a_ol": self.a_ol, "v_pos_v": self.v_pos_v, "v_neg_v": self.v_neg_v,
                "headroom_v": self.headroom_v, "vos_v": self.vos_v,
                "ib_plus_a": self.ib_plus_a, "ib_minus_a": self.ib_minus_a,
                "ro_ohm": self.ro_ohm, "gbw_hz": self.gbw_hz}


@dataclass(frozen=True)
class Param:
    """A stage parameter: name, unit kind (see :data:`livecurve.units.UNITS`), default.

    ``default=None`` means required.  ``sign`` is +1 (must be > 0), 0 (any finite
    value) or 2 (0…1 fraction).
    """

    name: str
    unit: str
    default: float | None
    sign: int = 1
    doc: str = ""


@dataclass(frozen=True)
class StageKind:
    """A registry entry: parameters, whether it takes a junction model, and the builder."""

    name: str
    params: tuple[Param, ...]
    build: Callable
    junction: str | None  # None, "diode" or "diode|npn|pnp"
    doc: str
    legs: bool = False
    noise_gain: Callable | None = None


def _opamp(net: Netlist, op: OpampSpec, plus: str, minus: str, out: str = "out") -> None:
    net.opamp("U1", plus, minus, out, **op.element_kw())


def _reference_divider(net: Netlist, p: dict, node: str = "tap") -> None:
    """Pot of r_pot with wiper at `trim` (0…1 from −Vref to +Vref) and end-stops r_end."""
    v = p["v_ref"]
    net.voltage("VREFP", "refp", "0", v)
    net.voltage("VREFN", "refn", "0", -v)
    t = min(max(p["trim"], 1e-6), 1 - 1e-6)
    net.resistor("RPOTH", "refp", node, p["r_end"] + p["r_pot"] * (1 - t))
    net.resistor("RPOTL", node, "refn", p["r_end"] + p["r_pot"] * t)


def _junction(net: Netlist, name: str, a: str, c: str, dev: DiodeModel | BjtModel,
              ground: str = "0", sum_node: str = "sum") -> None:
    """A junction between *a* and *c*: a diode conducting from *a* to *c*, or a BJT
    wired as a transdiode.

    A BJT always has its base at *ground* and its collector at *sum_node* (the op-amp's
    summing node, held at 0 V, so VCB ≈ 0 and the transistor runs forward-active as in
    AN-30 / MT-077); its emitter goes to the other of *a*, *c*.  An NPN then conducts
    from the summing node into its emitter node and a PNP the other way, so each
    polarity serves one sign of input current.
    """
    if isinstance(dev, DiodeModel):
        net.diode(name, a, c, dev)
        return
    if sum_node not in (a, c):
        raise ValueError(f"a transdiode needs the summing node '{sum_node}' as one end")
    emitter = c if a == sum_node else a
    net.bjt(name, sum_node, ground, emitter, dev)


_DIV = (Param("v_ref", "V", 10.0, 1, "± reference volts across the offset pot"),
        Param("r_pot", "ohm", 10e3, 1, "offset pot"),
        Param("r_end", "ohm", 1e3, 1, "end-stop resistor each side of the pot"),
        Param("trim", "", 0.5, 2, "pot wiper position 0…1 (0 = −Vref end)"))


def _inverting(p, dev, op, legs):
    n = Netlist()
    n.vin()
    n.resistor("RIN", "in", "sum", p["r_in"])
    n.resistor("RF", "sum", "out", p["r_f"])
    if p.get("r_off", 0) > 0:
        _reference_divider(n, p)
        n.resistor("ROFF", "tap", "sum", p["r_off"])
    _opamp(n, op, "0", "sum")
    return n


def _noninverting(p, dev, op, legs):
    n = Netlist()
    n.vin()
    n.resistor("RG", "tap", "sum", p["r_g"])
    n.resistor("RF", "sum", "out", p["r_f"])
    _reference_divider(n, p)
    _opamp(n, op, "in", "sum")
    return n


def _log(p, dev, op, legs):
    n = Netlist()
    n.vin()
    n.resistor("RIN", "in", "sum", p["r_in"])
    if p["i_ref"] != 0:
        n.current("IREF", "0", "sum", p["i_ref"])
    _junction(n, "Q1", "sum", "out", dev)
    _opamp(n, op, "0", "sum")
    return n


def _log_bipolar(p, dev, op, legs):
    n = Netlist()
    n.vin()
    n.resistor("RIN", "in", "sum", p["r_in"])
    _junction(n, "Q1", "sum", "out", dev)
    _junction(n, "Q2", "out", "sum", _mirror(dev))
    if p.get("r_f", 0) > 0:
        n.resistor("RF", "sum", "out", p["r_f"])
    _opamp(n, op, "0", "sum")
    return n


def _mirror(dev):
    """The junction of opposite polarity for the second leg (a diode stays a diode)."""
    if isinstance(dev, DiodeModel):
        return dev
    return dev.scaled(polarity="pnp" if dev.polarity == "npn" else "npn")


def _soft_limiter(p, dev, op, legs):
    n = Netlist()
    n.vin()
    n.resistor("RIN", "in", "sum", p["r_in"])
    n.resistor("RF", "sum", "out", p["r_f"])
    n.resistor("RKP", "sum", "kp", p["r_k"])
    n.diode("DP", "kp", "out", dev)
    n.resistor("RKN", "sum", "kn", p["r_k"])
    n.diode("DN", "out", "kn", dev)
    _opamp(n, op, "0", "sum")
    return n


def _breakpoint(p, dev, op, legs):
    n = Netlist()
    n.vin()
    n.resistor("RIN", "in", "sum", p["r_in"])
    n.resistor("RF", "sum", "out", p["r_f"])
    for k, leg in enumerate(legs):
        node = f"leg{k}"
        n.resistor(f"RS{k}", "in", node, leg["r_series"])
        n.resistor(f"RB{k}", node, f"bias{k}", leg["r_bias"])
        n.voltage(f"VB{k}", f"bias{k}", "0", leg["v_bias"])
        if leg["direction"] == "rising":
            n.diode(f"D{k}", node, "sum", dev)
        else:
            n.diode(f"D{k}", "sum", node, dev)
    _opamp(n, op, "0", "sum")
    return n


def _antilog(p, dev, op, legs):
    n = Netlist()
    n.vin()
    src = "in"
    if p.get("r_att_top", 0) > 0:
        n.resistor("RATT", "in", "att", p["r_att_top"])
        n.resistor("RATB", "att", "0", p["r_att_bottom"])
        src = "att"
    _junction(n, "Q1", src, "sum", dev)
    n.resistor("RF", "sum", "out", p["r_f"])
    if p.get("i_bias", 0) != 0:
        n.current("IB", "sum", "0", p["i_bias"])
    _opamp(n, op, "0", "sum")
    return n


def _ng_inverting(p):
    return 1.0 + p["r_f"] / p["r_in"]


def _ng_noninv(p):
    return 1.0 + p["r_f"] / p["r_g"]


LEG_PARAMS = (Param("r_series", "ohm", None, 1, "resistor from the input to the leg node"),
              Param("r_bias", "ohm", None, 1, "resistor from the leg node to its bias source"),
              Param("v_bias", "V", None, 0, "bias voltage setting the break-point"))

KINDS: dict[str, StageKind] = {
    "inverting_gain": StageKind(
        "inverting_gain",
        (Param("r_in", "ohm", None), Param("r_f", "ohm", None),
         Param("r_off", "ohm", 0.0, 0, "offset resistor from the pot wiper; 0 = no offset"),
         *_DIV),
        _inverting, None, "Vout = −(Rf/Rin)·Vin + offset from a reference divider",
        noise_gain=_ng_inverting),
    "noninverting_gain": StageKind(
        "noninverting_gain",
        (Param("r_g", "ohm", None), Param("r_f", "ohm", None), *_DIV),
        _noninverting, None, "Vout = (1 + Rf/Rg)·Vin − (Rf/Rg)·Vtap", noise_gain=_ng_noninv),
    "log_transdiode": StageKind(
        "log_transdiode",
        (Param("r_in", "ohm", None),
         Param("i_ref", "A", 0.0, 0, "reference current into the summing node (knee)")),
        _log, "diode|npn|pnp", "Vout ≈ −n·VT·ln((Vin/Rin + Iref)/IS)"),
    "log_bipolar": StageKind(
        "log_bipolar",
        (Param("r_in", "ohm", None),
         Param("r_f", "ohm", 0.0, 0, "optional resistor across the junctions; 0 = none")),
        _log_bipolar, "diode|npn|pnp", "anti-parallel junctions: both polarities compress"),
    "soft_limiter": StageKind(
        "soft_limiter",
        (Param("r_in", "ohm", None), Param("r_f", "ohm", None),
         Param("r_k", "ohm", None, 1, "resistor in series with each feedback junction")),
        _soft_limiter, "diode", "slope eases from −Rf/Rin to −(Rf‖Rk)/Rin",
        noise_gain=_ng_inverting),
    "breakpoint_shaper": StageKind(
        "breakpoint_shaper",
        (Param("r_in", "ohm", None), Param("r_f", "ohm", None)),
        _breakpoint, "diode", "diode legs switching in at their own break-points", legs=True,
        noise_gain=_ng_inverting),
    "antilog": StageKind(
        "antilog",
        (Param("r_f", "ohm", None),
         Param("r_att_top", "ohm", 0.0, 0, "input attenuator, top; 0 = none"),
         Param("r_att_bottom", "ohm", 0.0, 0, "input attenuator, bottom"),
         Param("i_bias", "A", 0.0, 0, "current drawn from the summing node (output offset)")),
        _antilog, "diode|npn|pnp", "Vout ≈ −Rf·IS·exp(Vin/(n·VT))"),
}


def build_stage(kind: str, params: dict, device, op: OpampSpec, legs=(), name: str = "stage"):
    """Build the netlist of one stage.

    Parameters
    ----------
    kind : str
        A key of :data:`KINDS`.
    params : dict
        Parameter name → SI value (already validated).
    device : DiodeModel or BjtModel or None
        The stage's junction model.
    op : OpampSpec
    legs : sequence of dict
        Break-point legs (``breakpoint_shaper`` only).
    """
    if kind not in KINDS:
        raise ConfigError(f"unknown stage kind; accepted: {', '.join(KINDS)}, netlist",
                          key=f"{name}.kind", value=kind)
    net = KINDS[kind].build(params, device, op, list(legs))
    net.name = name
    return net


def check_param(kind: StageKind, prm: Param, value: float, key: str, path=None) -> float:
    """Refuse a parameter value that no real part can have."""
    if prm.sign == 1 and not value > 0:
        raise ConfigError("must be above zero", path=path, key=key, value=value)
    if prm.sign == 2 and not 0.0 <= value <= 1.0:
        raise ConfigError("must be a fraction from 0 to 1", path=path, key=key, value=value)
    if not math.isfinite(value):
        raise ConfigError("must be finite", path=path, key=key, value=value)
    if prm.name in ("r_off", "r_f", "r_att_top", "r_att_bottom") and value < 0:
        raise ConfigError("a resistance cannot be negative", path=path, key=key, value=value)
    return value
