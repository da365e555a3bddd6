"""SPICE decks of a chain: the same netlists, models and temperature as the engine.

The deck is self-contained and runs in ``ngspice -b``: the swept source is ``VIN``,
channel outputs are nodes ``out0``, ``out1``, ``out2``, and a ``.dc`` sweep covers
the chain's sweep range.  Stages are joined by unity VCVS buffers, exactly as the
engine composes them.  Op-amps are behavioural sources
``out = mid + half·tanh(A·(v+ − v−)/half)``, the same law the solver uses.

Tolerances follow REFERENCES.md: ngspice's default RELTOL leaves ~0.2 mV on log-amp
outputs, so decks carry ``.options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16``.
"""

from __future__ import annotations

import numpy as np

from livecurve.circuit.devices import T_NOM_K, BjtModel, DiodeModel
from livecurve.circuit.netlist import GROUND, Netlist

OPTIONS = ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16 ITL1=500 ITL2=500"


def _g(x: float) -> str:
    return f"{x:.12g}"


def netlist_cards(net: Netlist, prefix: str, t_kelvin: float | None = None,
                  ground: str = "0") -> list[str]:
    """SPICE cards for one stage; node ``n`` becomes ``{prefix}_n``; VIN is omitted.

    *t_kelvin*, when given, sets each junction's instance temperature (``temp=`` in °C).
    """
    def nd(n: str) -> str:
        return ground if n in GROUND else f"{prefix}_{n}"

    tcard = "" if t_kelvin is None else f" temp={_g(t_kelvin - 273.15)}"
    cards, models = [], []
    for el in net.elements:
        name = f"{prefix}_{el.name}"
        if el.kind == "VIN":
            continue
        if el.kind == "R":
            cards.append(f"R{name} {nd(el.nodes[0])} {nd(el.nodes[1])} {_g(el.value)}")
        elif el.kind == "I":
            cards.append(f"I{name} {nd(el.nodes[0])} {nd(el.nodes[1])} DC {_g(el.value)}")
        elif el.kind == "V":
            cards.append(f"V{name} {nd(el.nodes[0])} {nd(el.nodes[1])} DC {_g(el.value)}")
        elif el.kind == "E":
            p, n_, o, r = el.nodes
            cards.append(f"E{name} {nd(o)} {nd(r)} {nd(p)} {nd(n_)} {_g(el.value)}")
        elif el.kind == "D":
            m: DiodeModel = el.model
            mname = f"DM_{name}"
            cards.append(f"D{name} {nd(el.nodes[0])} {nd(el.nodes[1])} {mname}{tcard}")
            models.append(f".model {mname} D(IS={_g(m.is_a)} N={_g(m.n)} RS={_g(m.rs_ohm)} "
                          f"EG={_g(m.eg_ev)} XTI={_g(m.xti)})")
        elif el.kind == "Q":
            m: BjtModel = el.model
            mname = f"QM_{name}"
            c, b, e = el.nodes
            cards.append(f"Q{name} {nd(c)} {nd(b)} {nd(e)} {mname}{tcard}")
            models.append(f".model {mname} {m.polarity.upper()}(IS={_g(m.is_a)} BF={_g(m.bf)} "
                          f"BR={_g(m.br)} NF={_g(m.nf)} NR={_g(m.nr)} EG={_g(m.eg_ev)} "
                          f"XTI={_g(m.xti)} XTB={_g(m.xtb)} RE={_g(m.re_ohm)} "
                          f"RB={_g(m.rb_ohm)} RC={_g(m.rc_ohm)})")
        elif el.kind == "OA":
            p, n_, o = el.nodes
            hi, lo = el.extra["hi"], el.extra["lo"]
            mid, half = 0.5 * (hi + lo), 0.5 * (hi - lo)
            cards.append(f"B{name} {nd(o)} 0 V = {_g(mid)} + {_g(half)}*tanh({_g(el.value)}*"
                         f"(V({nd(p)})-V({nd(n_)}))/{_g(half)})")
    return cards + models


def chain_deck(model, *, t_kelvin: float | None = None, live: dict | None = None,
               points: int = 201, sweep_v: tuple | None = None, data_file: str | None = None,
               temps_k: dict | None = None) -> str:
    """A self-contained ngspice deck of a whole chain.

    Parameters
    ----------
    model : ChainModel
    t_kelvin : float, optional
        Circuit temperature (default the chain's ambient); written as ``.temp``.
    live : dict, optional
        Knob values (default the chain's starting values).
    points : int
        Points in the ``.dc`` sweep over *sweep_v* (default the chain's sweep range).
    data_file : str, optional
        If given, a ``.control`` block writes ``input, out0, out1, out2`` there with ``wrdata``;
        otherwise a ``.print dc`` line makes ``ngspice -b`` run the sweep and print it.
    temps_k : dict, optional
        Stage id → junction temperature (self-heating), as instance ``temp=``.
    """
    spec = model.spec
    t = spec.ambient_k if t_kelvin is None else t_kelvin
    lo, hi = spec.sweep_v if sweep_v is None else sweep_v
    step = (hi - lo) / (points - 1)
    lines = [f"* livecurve chain '{spec.title}' from {spec.path}",
             f"* temperature {t - 273.15:.3f} C; knob values: "
             f"{live if live is not None else model.live_defaults()}",
             "VIN vin 0 DC 0"]
    for ch in range(3):
        prev = "vin"
        for k, st in enumerate(model.stages_for(ch)):
            pre = f"c{ch}s{k}"
            net = model.netlist(ch, st, live)
            lines.append(f"* channel {ch}, stage {k}: {st.id} ({st.kind})")
            lines.append(f"EBUF_{pre} {pre}_in 0 {prev} 0 1")
            tk = temps_k.get(st.id) if temps_k else None
            lines += netlist_cards(net, pre, tk)
            prev = f"{pre}_out"
        lines.append(f"EOUT{ch} out{ch} 0 {prev} 0 1")
    lines += [OPTIONS, f".options TNOM={_g(T_NOM_K - 273.15)}", f".temp {_g(t - 273.15)}",
              f".dc VIN {_g(lo)} {_g(hi + 0.5 * step)} {_g(step)}"]
    if data_file:
        lines += [".control", "set wr_singlescale", "set wr_vecnames", "run",
                  f"wrdata {data_file} v(out0) v(out1) v(out2)", "quit", ".endc"]
    else:
        # ngspice -b runs no analysis in a deck without an output request
        lines.append(".print dc v(out0) v(out1) v(out2)")
    lines.append(".end")
    return "\n".join(lines) + "\n"


def stage_deck(net: Netlist, vin_v: np.ndarray, *, t_kelvin: float, data_file: str) -> str:
    """A deck sweeping one stage netlist over *vin_v* (uniform), for reference checks."""
    lo, hi = float(vin_v[0]), float(vin_v[-1])
    step = (hi - lo) / (len(vin_v) - 1)
    lines = [f"* livecurve stage {net.name}", "VIN s_in 0 DC 0"]
    lines += netlist_cards(net, "s")
    lines += [OPTIONS, f".options TNOM={_g(T_NOM_K - 273.15)}", f".temp {_g(t_kelvin - 273.15)}",
              f".dc VIN {_g(lo)} {_g(hi + 0.5 * step)} {_g(step)}", ".control",
              "set wr_singlescale", "set wr_vecnames", "run", f"wrdata {data_file} v(s_out)",
              "quit", ".endc", ".end"]
    return "\n".join(lines) + "\n"


def read_wrdata(path: str) -> np.ndarray:
    """Columns of an ngspice ``wrdata`` file (single scale, with names), shape (N, k)."""
    return np.loadtxt(path, skiprows=1, ndmin=2)
