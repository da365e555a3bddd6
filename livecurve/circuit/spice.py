"""SPICE decks of a chain: the same netlists, models and temperature as the engine.

The deck is self-contained and runs in ``ngspice -b``: the swept source is ``VIN``,
channel outputs are nodes ``out0``, ``out1``, ``out2``, and a ``.dc`` sweep covers
the chain's sweep range.  Stages are joined by unity VCVS buffers, exactly as the
engine composes them.  Op-amps are behavioural sources with the solver's law
(:func:`livecurve.circuit.netlist.opamp_law`: ``A·(v+ − v− + Vos)`` inside the output
swing, a quadratic knee at each end) written with ngspice's ``min``/``max``
(:func:`opamp_expression`), plus ``I`` cards for the input bias currents and an ``R``
card for the output resistance.  Capacitors and inductors are ``C``/``L`` cards.  The
decks are DC sweeps: an op-amp's gain-bandwidth is not written (it has no DC effect).

Tolerances follow REFERENCES.md: ngspice's default RELTOL leaves ~0.2 mV on log-amp
outputs, so decks carry ``.options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16``.

A deck is a program: ngspice runs ``.control`` blocks (and their ``shell`` command) from
any line, and treats a comment line that starts ``*#`` as a control line.  Text from a
chain file therefore never starts a line of its own here:

- comment text (title, path, knob names) is folded to one line of printable ASCII, and
  every comment line starts ``"* "``;
- element, node and model names must be letters, digits and ``_`` (refused otherwise);
- numbers are written by this module from floats and must be finite;
- the finished deck is checked line by line against the small grammar this module
  writes (:func:`check_deck`) before it is returned, so a slip in any writer is caught
  here rather than in the user's ngspice.
"""

from __future__ import annotations

import math
import re

import numpy as np

from livecurve.circuit.devices import T_NOM_K, BjtModel, DiodeModel
from livecurve.circuit.netlist import GROUND, Netlist
from livecurve.errors import SolverError

_NAME = re.compile(r"^[A-Za-z0-9_]+$")
_PATH = re.compile(r"^[A-Za-z0-9_./+\-]+$")
# Lines this module writes, and nothing else (see check_deck).
_COMMENT = re.compile(r"^\* [ -~]*$")
_ELEMENT = re.compile(r"^[RIVEDQBCL][A-Za-z0-9_]+( [A-Za-z0-9_.+\-*/()=,]+)+$")
_DOT = re.compile(r"^\.(options|temp|dc|print dc|model [A-Za-z0-9_]+ (D|NPN|PNP)\()"
                  r"[ A-Za-z0-9_.+\-=()]*$")
_CONTROL = re.compile(r"^(set wr_singlescale|set wr_vecnames|run|quit|"
                      r"wrdata [A-Za-z0-9_./+\-]+( v\([A-Za-z0-9_]+\))+)$")

OPTIONS = ".options RELTOL=1e-7 VNTOL=1e-10 ABSTOL=1e-16 ITL1=500 ITL2=500"


def _g(x: float) -> str:
    x = float(x)
    if not math.isfinite(x):
        raise SolverError(f"cannot write {x} into a SPICE deck (values must be finite)")
    return f"{x:.12g}"


def comment(text) -> str:
    """A SPICE comment line carrying *text*, which can never start a line of its own.

    Line breaks, tabs and every character outside printable ASCII become ``?``; the line
    starts with ``"* "`` (ngspice reads ``*#`` lines as control lines).
    """
    return "* " + "".join(c if " " <= c <= "~" else "?" for c in str(text))


def spice_name(name: str, what: str) -> str:
    """*name* if it is a safe SPICE token (letters, digits, ``_``), else SolverError."""
    name = str(name)
    if not _NAME.match(name):
        raise SolverError(f"{what} {name!r} cannot go into a SPICE deck: names take letters, "
                          "digits and _ only")
    return name


def check_deck(text: str) -> str:
    """Return *text* if every line is one this module writes, else raise SolverError.

    The grammar: comment lines (``* `` then printable ASCII), element lines (R I V E D Q B,
    a name, then tokens of names, numbers and the behavioural op-amp expression),
    ``.options``/``.temp``/``.dc``/``.print dc``/``.model`` cards, ``.end``, and one fixed
    ``.control`` block (``set``, ``run``, ``wrdata`` to a plain path, ``quit``).
    """
    in_control = False
    for no, line in enumerate(text.split("\n"), 1):
        if not line:
            continue
        if in_control:
            if line == ".endc":
                in_control = False
                continue
            ok = bool(_CONTROL.match(line))
        elif line == ".control":
            in_control, ok = True, True
        else:
            ok = line == ".end" or bool(_COMMENT.match(line) or _ELEMENT.match(line)
                                        or _DOT.match(line))
        if not ok:
            raise SolverError(f"refusing to write a SPICE deck: line {no} is not one livecurve "
                              f"writes: {line[:80]!r}")
    if in_control:
        raise SolverError("refusing to write a SPICE deck: unterminated .control block")
    return text


def _data_path(path: str) -> str:
    path = str(path)
    if not _PATH.match(path):
        raise SolverError(f"the wrdata path {path!r} cannot go into a SPICE deck: use letters, "
                          "digits and _ . / + - only")
    return path


def _num(x: float) -> str:
    """A number for an expression: negative values in parentheses."""
    return f"({_g(x)})" if x < 0 else _g(x)


def opamp_expressions(drive_node: str, upper_node: str, hi_v: float, lo_v: float,
                      knee_v: float) -> tuple[str, str]:
    """ngspice B-source text of :func:`livecurve.circuit.netlist.opamp_law` in two steps.

    The first expression (the upper knee) is written onto *upper_node* from the drive on
    *drive_node*; the second (the lower knee) gives the output from *upper_node*.  Only
    ``min``, ``max``, ``+ − * /`` and parentheses: every ngspice B source has them, and
    their derivatives are exact, so ngspice's Newton sees the solver's slope.
    """
    q = _g(4.0 * knee_v)
    u = f"min(V({drive_node}),{_num(hi_v + knee_v)})"
    e_hi = f"max({u}-{_num(hi_v - knee_v)},0)"
    upper = f"{u}-{e_hi}*{e_hi}/{q}"
    v = f"max(V({upper_node}),{_num(lo_v - knee_v)})"
    e_lo = f"max({_num(lo_v + knee_v)}-{v},0)"
    return upper, f"{v}+{e_lo}*{e_lo}/{q}"


def netlist_cards(net: Netlist, prefix: str, t_kelvin: float | None = None,
                  ground: str = "0") -> list[str]:
    """SPICE cards for one stage; node ``n`` becomes ``{prefix}_n``; VIN is omitted.

    *t_kelvin*, when given, sets each junction's instance temperature (``temp=`` in °C).
    """
    spice_name(prefix, "prefix")

    def nd(n: str) -> str:
        return ground if n in GROUND else f"{prefix}_{spice_name(n, 'node')}"

    tcard = "" if t_kelvin is None else f" temp={_g(t_kelvin - 273.15)}"
    cards, models = [], []
    for el in net.elements:
        if el.kind == "VIN":
            continue
        name = f"{prefix}_{spice_name(el.name, 'element')}"
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
            x = el.extra
            drive, upper = f"{name}_drive", f"{name}_knee"
            out = nd(o)
            if x["ro"] > 0:
                out = f"{name}_o"
                cards.append(f"R{name}_RO {out} {nd(o)} {_g(x['ro'])}")
            e_upper, e_out = opamp_expressions(drive, upper, x["hi"], x["lo"], x["knee"])
            cards += [f"B{name}_D {drive} 0 V = {_g(el.value)}*(V({nd(p)})-V({nd(n_)})"
                      f"+{_num(x['vos'])})",
                      f"B{name}_K {upper} 0 V = {e_upper}",
                      f"B{name} {out} 0 V = {e_out}"]
            for term, ib, tag in ((p, x["ib_plus"], "IBP"), (n_, x["ib_minus"], "IBN")):
                if ib != 0.0:
                    cards.append(f"I{name}_{tag} {nd(term)} 0 DC {_g(ib)}")
        elif el.kind == "C":
            cards.append(f"C{name} {nd(el.nodes[0])} {nd(el.nodes[1])} {_g(el.value)}")
        elif el.kind == "L":
            cards.append(f"L{name} {nd(el.nodes[0])} {nd(el.nodes[1])} {_g(el.value)}")
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
    knobs = live if live is not None else model.live_defaults()
    lines = [comment(f"livecurve chain '{spec.title}' from {spec.path}"),
             comment(f"temperature {t - 273.15:.3f} C; knob values: {knobs}"),
             "VIN vin 0 DC 0"]
    for ch in range(3):
        prev = "vin"
        for k, st in enumerate(model.stages_for(ch)):
            pre = f"c{ch}s{k}"
            net = model.netlist(ch, st, live)
            lines.append(comment(f"channel {ch}, stage {k}: {st.id} ({st.kind})"))
            lines.append(f"EBUF_{pre} {pre}_in 0 {prev} 0 1")
            tk = temps_k.get(st.id) if temps_k else None
            lines += netlist_cards(net, pre, tk)
            prev = f"{pre}_out"
        lines.append(f"EOUT{ch} out{ch} 0 {prev} 0 1")
    lines += [OPTIONS, f".options TNOM={_g(T_NOM_K - 273.15)}", f".temp {_g(t - 273.15)}",
              f".dc VIN {_g(lo)} {_g(hi + 0.5 * step)} {_g(step)}"]
    if data_file:
        lines += [".control", "set wr_singlescale", "set wr_vecnames", "run",
                  f"wrdata {_data_path(data_file)} v(out0) v(out1) v(out2)", "quit", ".endc"]
    else:
        # ngspice -b runs no analysis in a deck without an output request
        lines.append(".print dc v(out0) v(out1) v(out2)")
    lines.append(".end")
    return check_deck("\n".join(lines) + "\n")


def stage_deck(net: Netlist, vin_v: np.ndarray, *, t_kelvin: float, data_file: str) -> str:
    """A deck sweeping one stage netlist over *vin_v* (uniform), for reference checks."""
    lo, hi = float(vin_v[0]), float(vin_v[-1])
    step = (hi - lo) / (len(vin_v) - 1)
    lines = [comment(f"livecurve stage {net.name}"), "VIN s_in 0 DC 0"]
    lines += netlist_cards(net, "s")
    lines += [OPTIONS, f".options TNOM={_g(T_NOM_K - 273.15)}", f".temp {_g(t_kelvin - 273.15)}",
              f".dc VIN {_g(lo)} {_g(hi + 0.5 * step)} {_g(step)}", ".control",
              "set wr_singlescale", "set wr_vecnames", "run",
              f"wrdata {_data_path(data_file)} v(s_out)", "quit", ".endc", ".end"]
    return check_deck("\n".join(lines) + "\n")


def read_wrdata(path: str) -> np.ndarray:
    """Columns of an ngspice ``wrdata`` file (single scale, with names), shape (N, k)."""
    return np.loadtxt(path, skiprows=1, ndmin=2)
