"""A small stage netlist: named nodes, textbook elements, compiled for the solver.

Elements (SPICE conventions for names and signs):

========  =========================================================  ==============
kind      meaning                                                    SPICE card
========  =========================================================  ==============
R         resistor between two nodes, ohms                           ``R``
I         current source, amps flowing *from* node a *through* it    ``I``
          *to* node b
V         voltage source, v(a) − v(b) = volts                         ``V``
VIN       the swept input source (``in`` to ground)                  ``V`` (VIN)
D         Shockley diode a→c with a :class:`DiodeModel`              ``D`` + .model
Q         NPN/PNP BJT (c, b, e) with a :class:`BjtModel`             ``Q`` + .model
OA        op-amp (+, −, out): out = limit(A·(v+ − v− + Vos)), linear ``B`` source
          inside the output swing (rails less a headroom), a          (+ ``I``, ``R``)
          quadratic knee at each end (:func:`opamp_law`); optional
          input bias currents and output resistance
E         linear voltage-controlled voltage source                   ``E``
C         capacitor: open at DC (small-signal dynamics only,         ``C``
          :mod:`livecurve.circuit.smallsignal`)
L         inductor: a 0 V source at DC, its current a branch         ``L``
          unknown (a state of the small-signal dynamics)
========  =========================================================  ==============

Every stage has an input node ``in`` (driven by VIN) and an output node ``out``.
Series resistances of junctions (diode RS, BJT RE/RB/RC) become internal nodes
and resistors when compiled, exactly as SPICE treats them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from livecurve.circuit import solver as _s
from livecurve.circuit.devices import BjtModel, DiodeModel, thermal_voltage
from livecurve.errors import ConfigError, SolverError

GROUND = ("0", "gnd", "GND")

#: Half-width of the op-amp's output knee, volts: the output is exactly A·vd until it comes
#: within KNEE_V of a limit, then bends over a parabola and reaches the limit when the
#: drive A·vd is KNEE_V beyond it (narrowed to a quarter of the swing on tiny swings).
KNEE_V = 0.2


def opamp_slope(drive_v: float, hi_v: float, lo_v: float, knee_v: float = KNEE_V) -> float:
    """d(opamp_law)/d(drive) at one drive value: 1 inside, falling linearly to 0 across
    each knee, 0 beyond."""
    d = float(drive_v)
    if d >= hi_v + knee_v or d <= lo_v - knee_v:
        return 0.0
    if d > hi_v - knee_v:
        return 1.0 - (d - (hi_v - knee_v)) / (2.0 * knee_v)
    if d < lo_v + knee_v:
        return 1.0 - ((lo_v + knee_v) - d) / (2.0 * knee_v)
    return 1.0


def opamp_law(drive_v, hi_v: float, lo_v: float, knee_v: float = KNEE_V):
    """The op-amp's static output for an open-loop drive ``A·(v+ − v− + Vos)`` (volts).

    ``y = drive`` for ``lo + knee <= drive <= hi − knee``; above, with
    ``e = drive − (hi − knee)``, ``y = drive − e²/(4·knee)`` up to ``drive = hi + knee``
    and ``y = hi`` beyond (mirrored at the low end).  Value and slope are continuous (C1),
    the slope falls linearly from 1 to 0 across the knee, and there is no offset anywhere
    inside the swing whatever the rails.

    Returns
    -------
    ndarray (same shape as *drive_v*), volts.
    """
    v = np.asarray(drive_v, dtype=np.float64)
    e_hi = np.clip(v - (hi_v - knee_v), 0.0, 2.0 * knee_v)
    y = np.minimum(v, hi_v + knee_v) - e_hi * e_hi / (4.0 * knee_v)
    e_lo = np.clip((lo_v + knee_v) - y, 0.0, 2.0 * knee_v)
    return np.maximum(y, lo_v - knee_v) + e_lo * e_lo / (4.0 * knee_v)


@dataclass
class Element:
    """One element: kind, name, node names and SI parameters."""

    kind: str
    name: str
    nodes: tuple[str, ...]
    value: float = 0.0
    model: DiodeModel | BjtModel | None = None
    extra: dict = field(default_factory=dict)


@dataclass
class Compiled:
    """Arrays the solver kernel takes, at one temperature."""

    kinds: np.ndarray
    nodes: np.ndarray
    params: np.ndarray
    branch: np.ndarray
    n_nodes: int
    n_unknowns: int
    node_index: dict
    out_index: int
    element_rows: dict = field(default_factory=dict)  # OA / L element name -> its row
    #: Row k → the name of the element it came from (a diode's RS resistor row, an
    #: op-amp's bias-current rows, … belong to that diode or op-amp).
    row_element: list = field(default_factory=list)
    #: Element name → its kind letter (``"R"``, ``"D"``, ``"OA"``, ``"L"``, …).
    element_kind: dict = field(default_factory=dict)
    #: The stage's name, for messages.
    name: str = "netlist"


class Netlist:
    """Builder for a stage netlist.

    Parameters
    ----------
    name : str
        Stage name, used in messages and as a prefix in SPICE decks.
    """

    def __init__(self, name: str = "stage"):
        self.name = name
        self.elements: list[Element] = []

    # ---- building -------------------------------------------------------------------
    def _add(self, el: Element) -> Element:
        if any(e.name == el.name for e in self.elements):
            raise ConfigError(f"element name '{el.name}' used twice in stage '{self.name}'",
                              key=f"{self.name}.{el.name}")
        self.elements.append(el)
        return el

    def resistor(self, name: str, a: str, b: str, r_ohm: float) -> Element:
        if not (r_ohm > 0.0) or not math.isfinite(r_ohm):
            raise ConfigError("a resistance must be finite and above zero ohms",
                              key=f"{self.name}.{name}", value=r_ohm)
        return self._add(Element("R", name, (a, b), float(r_ohm)))

    def current(self, name: str, a: str, b: str, i_amp: float) -> Element:
        """Current source: *i_amp* flows from node *a* through the source into node *b*."""
        return self._add(Element("I", name, (a, b), float(i_amp)))

    def voltage(self, name: str, a: str, b: str, v_volt: float) -> Element:
        return self._add(Element("V", name, (a, b), float(v_volt)))

    def vin(self) -> Element:
        return self._add(Element("VIN", "VIN", ("in", "0"), 0.0))

    def diode(self, name: str, anode: str, cathode: str, model: DiodeModel) -> Element:
        model.check(f"{self.name}.{name}")
        return self._add(Element("D", name, (anode, cathode), model=model))

    def bjt(self, name: str, c: str, b: str, e: str, model: BjtModel) -> Element:
        model.check(f"{self.name}.{name}")
        return self._add(Element("Q", name, (c, b, e), model=model))

    def opamp(self, name: str, plus: str, minus: str, out: str, *, a_ol: float,
              v_pos_v: float, v_neg_v: float, headroom_v: float, vos_v: float = 0.0,
              ib_plus_a: float = 0.0, ib_minus_a: float = 0.0, ro_ohm: float = 0.0,
              gbw_hz: float | None = None) -> Element:
        """Op-amp with open-loop gain *a_ol*; output swings between the rails less *headroom_v*.

        *vos_v* is the input offset (added to v+ − v−); *ib_plus_a* / *ib_minus_a* are the
        bias currents drawn out of the + / − input nodes into the op-amp; *ro_ohm* is the
        open-loop output resistance; *gbw_hz* the gain-bandwidth product (dynamics only:
        a single pole at gbw/a_ol).
        """
        hi, lo = v_pos_v - headroom_v, v_neg_v + headroom_v
        key = f"{self.name}.{name}"
        if not hi > lo:
            raise ConfigError("rails less headroom leave no output swing",
                              key=key, value=(v_neg_v, v_pos_v, headroom_v))
        if not a_ol > 0:
            raise ConfigError("open-loop gain must be above zero", key=key, value=a_ol)
        for what, v in (("vos", vos_v), ("ib_plus", ib_plus_a), ("ib_minus", ib_minus_a)):
            if not math.isfinite(v):
                raise ConfigError("must be finite", key=f"{key}.{what}", value=v)
        if not (ro_ohm >= 0.0 and math.isfinite(ro_ohm)):
            raise ConfigError("output resistance must be finite and 0 or more",
                              key=f"{key}.ro", value=ro_ohm)
        if gbw_hz is not None and not (gbw_hz > 0.0 and math.isfinite(gbw_hz)):
            raise ConfigError("gain-bandwidth must be finite and above zero",
                              key=f"{key}.gbw", value=gbw_hz)
        knee = min(KNEE_V, 0.25 * (hi - lo))
        return self._add(Element("OA", name, (plus, minus, out), float(a_ol),
                                 extra={"hi": hi, "lo": lo, "knee": knee, "vos": float(vos_v),
                                        "ib_plus": float(ib_plus_a),
                                        "ib_minus": float(ib_minus_a),
                                        "ro": float(ro_ohm), "gbw": gbw_hz}))

    def capacitor(self, name: str, a: str, b: str, c_farad: float) -> Element:
        """Capacitor (open at DC; a state of the small-signal dynamics)."""
        if not (c_farad > 0.0) or not math.isfinite(c_farad):
            raise ConfigError("a capacitance must be finite and above zero farads",
                              key=f"{self.name}.{name}", value=c_farad)
        return self._add(Element("C", name, (a, b), float(c_farad)))

    def inductor(self, name: str, a: str, b: str, l_henry: float) -> Element:
        """Inductor (a short at DC; a state of the small-signal dynamics)."""
        if not (l_henry > 0.0) or not math.isfinite(l_henry):
            raise ConfigError("an inductance must be finite and above zero henries",
                              key=f"{self.name}.{name}", value=l_henry)
        return self._add(Element("L", name, (a, b), float(l_henry)))

    def vcvs(self, name: str, plus: str, minus: str, out: str, ref: str, gain: float) -> Element:
        return self._add(Element("E", name, (plus, minus, out, ref), float(gain)))

    # ---- compiling ------------------------------------------------------------------
    def node_names(self) -> list[str]:
        names: list[str] = []
        for el in self.elements:
            for n in el.nodes:
                if n not in GROUND and n not in names:
                    names.append(n)
        return names

    def compile(self, t_kelvin: float) -> Compiled:
        """Arrays for the solver at junction temperature *t_kelvin* (device laws applied)."""
        idx: dict[str, int] = {}

        def node(n: str) -> int:
            if n in GROUND:
                return -1
            if n not in idx:
                idx[n] = len(idx)
            return idx[n]

        if "in" not in self.node_names() or "out" not in self.node_names():
            raise ConfigError("a stage netlist needs nodes 'in' and 'out'", key=self.name)
        rows: list[tuple[int, tuple[int, int, int, int], list[float], bool]] = []
        erows: dict[str, int] = {}
        starts: list[int] = []  # first row of each element
        vt = thermal_voltage(t_kelvin)
        for el in self.elements:
            starts.append(len(rows))
            if el.kind == "R":
                rows.append((_s.K_R, (node(el.nodes[0]), node(el.nodes[1]), -1, -1),
                             [1.0 / el.value], False))
            elif el.kind == "I":
                rows.append((_s.K_I, (node(el.nodes[0]), node(el.nodes[1]), -1, -1),
                             [el.value], False))
            elif el.kind in ("V", "VIN"):
                kind = _s.K_VIN if el.kind == "VIN" else _s.K_V
                rows.append((kind, (node(el.nodes[0]), node(el.nodes[1]), -1, -1),
                             [el.value], True))
            elif el.kind == "D":
                m: DiodeModel = el.model
                a, c = el.nodes
                if m.rs_ohm > 0:
                    inner = f"{el.name}#a"
                    rows.append((_s.K_R, (node(a), node(inner), -1, -1), [1.0 / m.rs_ohm],
                                 False))
                    a = inner
                is_t = m.is_at(t_kelvin)
                nvt = m.n * vt
                vcrit = nvt * math.log(nvt / (math.sqrt(2.0) * is_t))
                rows.append((_s.K_D, (node(a), node(c), -1, -1), [is_t, nvt, vcrit], False))
            elif el.kind == "Q":
                m: BjtModel = el.model
                c, b, e = el.nodes
                for rname, term in (("rc_ohm", "c"), ("rb_ohm", "b"), ("re_ohm", "e")):
                    r = getattr(m, rname)
                    if r > 0:
                        outer = {"c": c, "b": b, "e": e}[term]
                        inner = f"{el.name}#{term}"
                        rows.append((_s.K_R, (node(outer), node(inner), -1, -1), [1.0 / r],
                                     False))
                        if term == "c":
                            c = inner
                        elif term == "b":
                            b = inner
                        else:
                            e = inner
                is_t = m.is_at(t_kelvin)
                bfac = m.beta_factor(t_kelvin)
                vtf, vtr = m.nf * vt, m.nr * vt
                pol = 1.0 if m.polarity == "npn" else -1.0
                rows.append((_s.K_Q, (node(c), node(b), node(e), -1),
                             [is_t, m.bf * bfac, m.br * bfac, vtf, vtr, pol,
                              vtf * math.log(vtf / (math.sqrt(2.0) * is_t)),
                              vtr * math.log(vtr / (math.sqrt(2.0) * is_t))], False))
            elif el.kind == "OA":
                x = el.extra
                p, n_, o = el.nodes
                if x["ro"] > 0:
                    inner = f"{el.name}#o"
                    rows.append((_s.K_R, (node(inner), node(o), -1, -1), [1.0 / x["ro"]],
                                 False))
                    o = inner
                for term, ib in ((p, x["ib_plus"]), (n_, x["ib_minus"])):
                    if ib != 0.0:
                        rows.append((_s.K_I, (node(term), -1, -1, -1), [ib], False))
                erows[el.name] = len(rows)
                rows.append((_s.K_OA, (node(p), node(n_), node(o), -1),
                             [el.value, x["hi"], x["lo"], x["knee"], x["vos"]], True))
            elif el.kind == "C":
                pass  # open at DC
            elif el.kind == "L":
                # a short at DC: a 0 V source whose branch current is the inductor current
                erows[el.name] = len(rows)
                rows.append((_s.K_V, (node(el.nodes[0]), node(el.nodes[1]), -1, -1), [0.0],
                             True))
            elif el.kind == "E":
                p, n_, o, r = el.nodes
                rows.append((_s.K_E, (node(p), node(n_), node(o), node(r)), [el.value], True))
        owner = [el.name for el, a, b in zip(self.elements, starts, starts[1:] + [len(rows)],
                                             strict=True) for _ in range(a, b)]
        n_nodes = len(idx)
        kinds = np.array([r[0] for r in rows], dtype=np.int64)
        nodes = np.array([r[1] for r in rows], dtype=np.int64).reshape(-1, 4)
        params = np.zeros((len(rows), 8))
        branch = np.full(len(rows), -1, dtype=np.int64)
        nb_ = 0
        for k, r in enumerate(rows):
            params[k, :len(r[2])] = r[2]
            if r[3]:
                branch[k] = n_nodes + nb_
                nb_ += 1
        return Compiled(kinds, nodes, params, branch, n_nodes, n_nodes + nb_, dict(idx),
                        idx["out"], erows, owner, {el.name: el.kind for el in self.elements},
                        self.name)


def solve_sweep(net: Netlist | Compiled, vin_v, *, t_kelvin: float = 300.15,
                node: str = "out", strict: bool = True, x0: np.ndarray | None = None,
                solution: list | None = None) -> np.ndarray:
    """DC solution of a stage netlist at each input voltage.

    Parameters
    ----------
    net : Netlist or Compiled
        The stage (compiled at *t_kelvin* if a Netlist).
    vin_v : array_like, shape (N,)
        Input voltages in sweep order (volts); neighbouring values warm-start each other.
    t_kelvin : float
        Junction temperature, kelvin.
    node : str
        Which node's voltage to return (``"out"`` by default); ``"*"`` returns all unknowns.
    strict : bool
        Raise :class:`SolverError` if any point fails to converge (else NaN there).
    x0 : ndarray, optional
        Starting guess for the first point (e.g. a previous sweep's first solution).
    solution : list, optional
        If given, the full solution vector of the first point is appended to it (to
        warm-start a later sweep of a similar problem).

    Returns
    -------
    ndarray, shape (N,) float64 volts (or (N, n_unknowns) for ``node="*"``).

    Raises
    ------
    SolverError
        With *strict*, naming the stage, the first input that failed and — from
        :func:`livecurve.circuit.nonconvergence.diagnose`, run only then — the node and
        the elements at fault.
    """
    comp = net.compile(t_kelvin) if isinstance(net, Netlist) else net
    vin = np.ascontiguousarray(np.atleast_1d(np.asarray(vin_v, dtype=np.float64)))
    xs = np.empty((vin.shape[0], comp.n_unknowns))
    ok = np.zeros(vin.shape[0], dtype=np.bool_)
    warm = x0 is not None and x0.shape == (comp.n_unknowns,) and bool(np.isfinite(x0).all())
    start = np.ascontiguousarray(x0, dtype=np.float64) if warm else np.zeros(comp.n_unknowns)
    _s._solve_sweep(comp.kinds, comp.nodes, comp.params, comp.branch, comp.n_nodes, vin,
                    start, warm, xs, ok)
    if solution is not None and ok.size and ok[0]:
        solution.append(xs[0].copy())
    if strict and not ok.all():
        i = int(np.argmin(ok))
        msg = (f"DC solver did not converge for stage '{comp.name}' at input {vin[i]:.6g} V "
               f"({(~ok).sum()} of {len(vin)} points)")
        from livecurve.circuit.nonconvergence import diagnosis_or_nothing
        where = diagnosis_or_nothing(comp, vin, ok, xs, start if warm else None)
        raise SolverError(f"{msg}: {where}" if where else msg)
    if node == "*":
        return xs
    return xs[:, comp.node_index[node]]

