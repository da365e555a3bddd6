"""A stage written directly as SPICE-like element lines.

Grammar (a subset of the SPICE netlist card format, Nagel 1975; values take the
engineering units of :mod:`livecurve.units`)::

    R<name> <a> <b> <ohms>
    I<name> <from> <to> <amps>          current flows from <from> through the source to <to>
    V<name> <plus> <minus> <volts>
    D<name> <anode> <cathode> <model>
    Q<name> <c> <b> <e> <model>
    E<name> <out> <ref> <plus> <minus> <gain>
    C<name> <a> <b> <farads>            open at DC; a state of the stage's dynamics
    L<name> <a> <b> <henries>           a short at DC; a state of the stage's dynamics
    U<name> <plus> <minus> <out>        the stage's op-amp (chain-wide [opamp], or the
                                        stage's own [stage.opamp] override)

A stage with capacitors or inductors (or an op-amp with a gain-bandwidth) gets its
line-rate filter from this schematic (:func:`livecurve.engine.dynamics.schematic_dynamics`).

Node ``in`` is driven by the input, node ``out`` is the stage output, ``0`` is
ground.  Models are declared in the stage's ``models`` table.
"""

from __future__ import annotations

import functools
import re

from livecurve.circuit.devices import BjtModel, DiodeModel
from livecurve.circuit.netlist import GROUND, Netlist
from livecurve.circuit.stages import OpampSpec
from livecurve.errors import ConfigError
from livecurve.units import parse_value

_TOKEN = re.compile(r"^[A-Za-z0-9_]+$")
_ARITY = {"R": 3, "I": 3, "V": 3, "D": 3, "Q": 4, "E": 5, "U": 3, "C": 3, "L": 3}
_UNIT = {"R": "ohm", "I": "A", "V": "V", "E": "", "C": "F", "L": "H"}
#: Card letter → unit kind of its value (:data:`livecurve.units.UNITS`).
CARD_UNITS = dict(_UNIT)


@functools.lru_cache(maxsize=4096)
def _parsed(text: str, unit: str) -> float:
    return parse_value(text, unit)


def card_value(text: str, unit: str, *, key: str | None = None, path: str | None = None
               ) -> float:
    """The SI value of a card's value text, parsed once per distinct text (every later
    build, e.g. each table rebuild for a knob or a temperature, reuses it)."""
    try:
        return _parsed(text, unit)
    except ConfigError:
        return parse_value(text, unit, key=key, path=path)  # raises, naming key and file


def build_user_stage(lines, models: dict, op: OpampSpec, *, name: str, key: str,
                     path: str | None = None, values: dict | None = None) -> Netlist:
    """Build a netlist from element lines.

    Parameters
    ----------
    lines : list of str
        Element cards as above.
    models : dict
        Model name → DiodeModel or BjtModel.
    values : dict, optional
        Element name (lower case) → SI value overriding the card's value (used for
        per-channel overrides and live parameters, addressed as ``<stage>.<element>``).
    """
    net = Netlist(name)
    net.vin()
    values = values or {}
    for i, raw in enumerate(lines):
        k = f"{key}[{i}]"
        card = raw.split(";")[0].split()
        if not card:
            continue
        ename = card[0]
        letter = ename[0].upper()
        if letter not in _ARITY:
            raise ConfigError("unknown element letter; accepted: R I V D Q E C L U", path=path,
                              key=k, value=raw)
        if len(card) != _ARITY[letter] + 1:
            raise ConfigError(f"'{letter}' takes {_ARITY[letter]} fields after the name",
                              path=path, key=k, value=raw)
        f = card[1:]
        for tok in card[:-1] if letter in _UNIT else card:
            if not _TOKEN.match(tok):
                raise ConfigError(f"'{tok}': element, node and model names take letters, "
                                  "digits and _ only", path=path, key=k, value=raw)
        if ename.upper() == "VIN":
            raise ConfigError("VIN is the input source and is added for you", path=path, key=k,
                              value=raw)
        if letter in _UNIT:
            v = values.get(ename.lower())
            if v is None:
                v = card_value(f[-1], _UNIT[letter], key=k, path=path)
            if letter == "R":
                if not v > 0:
                    raise ConfigError("a resistance must be above zero ohms", path=path, key=k,
                                      value=f[-1])
                net.resistor(ename, f[0], f[1], v)
            elif letter == "I":
                net.current(ename, f[0], f[1], v)
            elif letter == "V":
                net.voltage(ename, f[0], f[1], v)
            elif letter in ("C", "L"):
                if not v > 0:
                    raise ConfigError(f"a{'' if letter == 'C' else 'n'} "
                                      f"{'capacitance' if letter == 'C' else 'inductance'} "
                                      "must be above zero", path=path, key=k, value=f[-1])
                if letter == "C":
                    net.capacitor(ename, f[0], f[1], v)
                else:
                    net.inductor(ename, f[0], f[1], v)
            else:
                net.vcvs(ename, f[2], f[3], f[0], f[1], v)
        elif letter in ("D", "Q"):
            m = models.get(f[-1])
            want = DiodeModel if letter == "D" else BjtModel
            if not isinstance(m, want):
                raise ConfigError(f"model '{f[-1]}' is not a declared "
                                  f"{'diode' if letter == 'D' else 'bjt'} model", path=path,
                                  key=k, value=raw)
            if letter == "D":
                net.diode(ename, f[0], f[1], m)
            else:
                net.bjt(ename, f[0], f[1], f[2], m)
        else:
            net.opamp(ename, f[0], f[1], f[2], **op.element_kw())
    nodes = net.node_names()
    if "out" not in nodes:
        raise ConfigError("the netlist has no node 'out'", path=path, key=key)
    _check_dc_paths(lines, path=path, key=key)
    if sum(1 for e in net.elements if "in" in e.nodes) < 2:
        raise ConfigError("nothing is connected to node 'in'", path=path, key=key)
    return net


def _check_dc_paths(lines, *, path, key) -> None:
    """Refuse a node no DC path joins to ground (node 0): its voltage is undefined, so the
    DC solver cannot converge there.  Resistors, voltage sources, controlled-source
    outputs, diodes, transistors and inductors carry DC; a current source and a capacitor
    do not; an op-amp output
    is driven against ground.  The message names the node and the elements on it."""
    adj: dict[str, set] = {"0": {"in"}, "in": {"0"}}  # the input source drives 'in'
    on_node: dict[str, list] = {}

    def join(a, b):
        a, b = ("0" if a in GROUND else a), ("0" if b in GROUND else b)
        adj.setdefault(a, set()).add(b)
        adj.setdefault(b, set()).add(a)

    for raw in lines:
        card = raw.split(";")[0].split()
        if not card:
            continue
        letter, f = card[0][0].upper(), card[1:]
        terms = {"R": f[:2], "V": f[:2], "I": f[:2], "E": f[:4], "D": f[:2], "Q": f[:3],
                 "U": f[:3], "C": f[:2], "L": f[:2]}.get(letter, [])
        for n in terms:
            n = "0" if n in GROUND else n
            adj.setdefault(n, set())
            on_node.setdefault(n, []).append(card[0])
        if letter in ("R", "V", "D", "L"):  # an inductor is a short at DC, a capacitor open
            join(f[0], f[1])
        elif letter == "E":
            join(f[0], f[1])
        elif letter == "Q":
            join(f[0], f[1])
            join(f[1], f[2])
        elif letter == "U":
            join(f[2], "0")
    seen, todo = {"0"}, ["0"]
    while todo:
        for m in adj[todo.pop()]:
            if m not in seen:
                seen.add(m)
                todo.append(m)
    for n in adj:
        if n not in seen:
            raise ConfigError(f"node '{n}' has no DC path to ground (0): only "
                              f"{', '.join(on_node.get(n, [])) or 'nothing'} reach it, so its "
                              "voltage is undefined and the DC solver cannot converge",
                              path=path, key=key, value=n)


def element_values(lines) -> dict:
    """Element name (lower case) → (letter, value text) of its card, for R/I/V/E/C/L cards."""
    out = {}
    for raw in lines:
        card = raw.split(";")[0].split()
        if card and card[0][0].upper() in _UNIT and len(card) >= 4:
            out[card[0].lower()] = (card[0][0].upper(), card[-1])
    return out
