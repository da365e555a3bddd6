"""Why a DC point does not converge: the node and the elements at fault, in the stage's names.

Runs only after :func:`livecurve.circuit.netlist.solve_sweep` has seen a point fail; the
sweep kernel (:func:`livecurve.circuit.solver._solve_sweep`) is not touched.  Two looks,
the cheaper first:

1. **Structure** (modified nodal analysis, Ho–Ruehli–Brennan 1975).  A loop of
   voltage-defining elements — the input source, V sources, inductors (0 V at DC),
   controlled-source and op-amp outputs — leaves the currents round it undefined; a node
   that no DC path joins to ground (only current sources, capacitors or op-amp inputs
   reach it) leaves its voltage undefined.  Either makes the MNA matrix singular at every
   input, so either is named outright with the elements that form it.
2. **The Newton iteration, replayed.**  The kernel's own stamp
   (:func:`livecurve.circuit.solver._stamp`) and elimination, its junction and op-amp
   step limiting, its damping to :data:`~livecurve.circuit.solver.MAX_STEP_V` and its
   iteration cap are rerun step for step in Python, from the nearest converged point of
   the sweep (zero volts if there is none) at the failing input.  If the replay does not
   settle, the node whose full (undamped) Newton step stayed largest over the last
   :data:`TAIL_ITER` iterations is the one at fault (ties go to the larger KCL residual).
   Reported with it: its KCL residual (the currents leaving it at the last iterate,
   junctions unlimited), whether Newton runs away from it in damped steps (and where it
   heads) or swings back and forth (and between which voltages), and the elements on it,
   nonlinear ones first, each with its state over those iterations — a junction's voltage,
   flagged when forward-biased beyond the voltage that would carry
   :data:`PLAUSIBLE_JUNCTION_A`; an op-amp's output, held at a limit or swinging, and
   whether its output reaches its + input through passive elements (positive feedback).
   If the Jacobian turns singular, the unknowns along its null direction are named.

Every message is one line.  A replay that converges (the kernel's later fallbacks start
elsewhere) singles nothing out and returns ``""``.
"""

from __future__ import annotations

import math

import numpy as np

from livecurve.circuit import solver as _s
from livecurve.circuit.netlist import Compiled, opamp_law
from livecurve.units import format_value

#: A junction forward-biased beyond the voltage at which it would carry this current (amps)
#: is reported as past any plausible junction voltage.
PLAUSIBLE_JUNCTION_A = 10.0
#: The last this many Newton iterations rank the nodes by how far they still move.
TAIL_ITER = 10
#: At most this many elements are listed at the node at fault.
MAX_LISTED = 5
#: A state that moves less than this over the last iterations is shown as one value, volts.
STEADY_V = 1e-3

_WORDS = {"R": "resistor", "I": "current source", "V": "voltage source", "VIN": "input source",
          "D": "diode", "Q": "transistor", "OA": "op-amp", "E": "controlled source",
          "C": "capacitor", "L": "inductor"}
_RANK = {"D": 0, "Q": 0, "OA": 0, "V": 1, "VIN": 1, "E": 1, "L": 1, "I": 2, "R": 3, "C": 4}
_TERMS = {"a": ("anode", "series"), "c": ("collector", "collector"), "b": ("base", "base"),
          "e": ("emitter", "emitter"), "o": ("output", "output")}
_KIND_OF_ROW = {_s.K_R: "R", _s.K_I: "I", _s.K_V: "V", _s.K_D: "D", _s.K_Q: "Q",
                _s.K_OA: "OA", _s.K_VIN: "VIN", _s.K_E: "E"}


def diagnosis_or_nothing(comp: Compiled, vin_v, ok, xs, x0) -> str:
    """:func:`diagnose` at the first failed point of a sweep, started from the nearest
    converged point (before it, else after it, else *x0*, else zero volts).

    Parameters
    ----------
    comp : Compiled
    vin_v : ndarray (N,)
        The sweep's inputs, volts.
    ok : ndarray (N,) bool
        Which points converged.
    xs : ndarray (N, n_unknowns)
        The sweep's solutions (NaN where it failed).
    x0 : ndarray (n_unknowns,) or None
        The sweep's warm start.

    Returns
    -------
    str
        The diagnosis, or ``""`` if nothing is singled out or the diagnosis itself fails
        (so the caller's message stands as it was, never a traceback).
    """
    i = int(np.argmin(ok))
    good = np.flatnonzero(ok)
    if good.size:
        before = good[good < i]
        x_start = xs[before[-1] if before.size else good[0]]
    else:
        x_start = x0
    try:
        return diagnose(comp, float(vin_v[i]), x_start=x_start)
    except Exception:  # a diagnosis must never replace the error it explains
        return ""


def diagnose(comp: Compiled, vin_v: float, *, x_start: np.ndarray | None = None) -> str:
    """Say where the DC solution of *comp* at input *vin_v* goes wrong (module docstring).

    Parameters
    ----------
    comp : Compiled
        The stage, compiled at the temperature that failed.
    vin_v : float
        The input that did not converge, volts.
    x_start : ndarray (n_unknowns,), optional
        Where the replayed Newton iteration starts (node volts, then branch amps).

    Returns
    -------
    str
        One line, e.g. ``node 'out' does not settle (KCL residual 960 mA; …); elements
        there: I1 (current source 1 A), …``; ``""`` if the replay converges.
    """
    found = _loop_of_sources(comp) or _floating_node(comp)
    if found:
        return found
    n, nn = comp.n_unknowns, comp.n_nodes
    x = (np.zeros(n) if x_start is None or np.shape(x_start) != (n,)
         or not np.isfinite(x_start).all() else np.array(x_start, dtype=np.float64))
    args = (comp.kinds, comp.nodes, comp.params, comp.branch, nn)
    vj = np.zeros((comp.kinds.shape[0], 2))
    J, f, dx = np.zeros((n, n)), np.zeros(n), np.zeros(n)
    # junction voltages of the start point (the kernel carries over the limited values of
    # its last iteration there; at a converged point the two differ by the last tiny step)
    _s._stamp(*args, x, vin_v, vj, False, 0.0, J, f)
    x_tail: list[np.ndarray] = []
    dx_tail: list[np.ndarray] = []
    for _ in range(_s.MAX_ITER):  # solver._newton, step for step
        limited = _s._stamp(*args, x, vin_v, vj, True, 0.0, J, f)
        jac = J.copy()
        if not _s._lu_solve(J, -f, dx):
            return _singular(comp, jac, x)
        big = float(np.max(np.abs(dx[:nn]), initial=0.0))
        scale = _s.MAX_STEP_V / big if big > _s.MAX_STEP_V else 1.0
        settled = (not limited and scale == 1.0 and bool(
            np.all(np.abs(dx[:nn]) <= _s.ABS_TOL_V + _s.REL_TOL * np.abs(x[:nn]))))
        x_tail = [*x_tail, x.copy()][-TAIL_ITER:]
        dx_tail = [*dx_tail, dx.copy()][-TAIL_ITER:]
        x_new = x + scale * dx
        if not np.isfinite(x_new).all():
            break
        x = x_new
        if settled:
            return ""
    return _unsettled(comp, vin_v, x, np.array(x_tail), np.array(dx_tail))


# ---- naming ------------------------------------------------------------------------------------
def _node_names(comp: Compiled) -> dict:
    return {i: name for name, i in comp.node_index.items()}


def _node_label(comp: Compiled, i: int) -> str:
    """A node in the user's words; an element's internal node (behind a series or output
    resistance) is named through the element and the node it hangs from."""
    if i < 0 or i >= comp.n_nodes:
        return "ground"
    names = _node_names(comp)
    name = names[i]
    if "#" not in name:
        return f"node '{name}'"
    owner, term = name.split("#", 1)
    outer = "0"
    for k, o in enumerate(comp.row_element):
        if o == owner and comp.kinds[k] == _s.K_R and i in comp.nodes[k, :2]:
            j = int(comp.nodes[k, 0] if comp.nodes[k, 1] == i else comp.nodes[k, 1])
            outer = names.get(j, "0")
    what, res = _TERMS.get(term, (term, "series"))
    return f"the inner {what} of {owner} (behind its {res} resistance from node '{outer}')"


def _kind(comp: Compiled, element: str) -> str:
    if element in comp.element_kind:
        return comp.element_kind[element]
    return _KIND_OF_ROW[int(comp.kinds[comp.row_element.index(element)])]


def _elements_at(comp: Compiled, i: int) -> list[str]:
    """Names of the elements with a terminal on node *i*, nonlinear ones first."""
    names: list[str] = []
    for k, o in enumerate(comp.row_element):
        if i in comp.nodes[k] and o not in names:
            names.append(o)
    return sorted(names, key=lambda e: _RANK.get(_kind(comp, e), 5))


# ---- values ------------------------------------------------------------------------------------
def _v(v: float) -> str:
    """Signed volts with an engineering prefix; below a nanovolt, 0 V."""
    v = float(v)
    if abs(v) < 1e-9:
        return "0 V"
    return ("+" if v > 0 else "") + format_value(v, "V")


def _a(i: float) -> str:
    """A current's size with an engineering prefix, bounded to what a stage can mean."""
    i = abs(float(i))
    if not i < 1e3:
        return f"over {format_value(1e3, 'A')}"
    if i < 1e-12:
        return f"under {format_value(1e-12, 'A')}"
    return format_value(i, "A")


def _volt(x: np.ndarray, i: int) -> np.ndarray:
    """Node *i*'s voltage at each iterate of *x* (iterates × unknowns)."""
    return np.zeros(x.shape[0]) if i < 0 else x[:, i]


def _span(v: np.ndarray) -> str:
    """One value, or the range it swings over."""
    if float(v.max() - v.min()) < STEADY_V:
        return _v(v[-1])
    return f"swings between {_v(v.min())} and {_v(v.max())}"


def _junction(v: np.ndarray, is_a: float, nvt: float, what: str) -> str:
    """A junction's voltage over the iterates, flagged when it is forward-biased beyond the
    voltage that would carry :data:`PLAUSIBLE_JUNCTION_A`."""
    v_max = nvt * math.log(PLAUSIBLE_JUNCTION_A / is_a + 1.0)
    text = f"{what} {_span(v)}"
    if v.max() > v_max:
        text += (f", forward-biased beyond the {format_value(v_max, 'V')} at which it "
                 f"would carry {format_value(PLAUSIBLE_JUNCTION_A, 'A')}")
    return text


# ---- elements ----------------------------------------------------------------------------------
def _describe(comp: Compiled, element: str, x: np.ndarray) -> str:
    """``name (what it is, its state over the iterates x)``; x is iterates × unknowns."""
    kind = _kind(comp, element)
    rows = [k for k, o in enumerate(comp.row_element) if o == element]
    main = next((k for k in rows if comp.kinds[k] in (_s.K_D, _s.K_Q, _s.K_OA)),
                rows[0] if rows else -1)
    if main < 0:
        return f"{element} ({_WORDS.get(kind, kind)})"
    a, b, c = (int(v) for v in comp.nodes[main, :3])
    p = comp.params[main]
    if kind == "D":
        state = "diode, " + _junction(_volt(x, a) - _volt(x, b), p[0], p[1], "junction")
    elif kind == "Q":
        pol = p[5]
        vbe = pol * (_volt(x, b) - _volt(x, c))
        vbc = pol * (_volt(x, b) - _volt(x, a))
        be, bc = ("VBE", "VBC") if pol > 0 else ("VEB", "VCB")  # forward-bias positive
        state = (f"{'npn' if pol > 0 else 'pnp'} transistor, {_junction(vbe, p[0], p[3], be)}"
                 f", {_junction(vbc, p[0], p[4], bc)}")
    elif kind == "OA":
        drive = p[0] * (_volt(x, a) - _volt(x, b) + p[4])
        hi, lo, knee = p[1], p[2], p[3]
        if np.all(drive >= hi - knee):
            state = f"op-amp, output at its {_v(hi)} limit"
        elif np.all(drive <= lo + knee):
            state = f"op-amp, output at its {_v(lo)} limit"
        else:
            state = f"op-amp, output {_span(opamp_law(drive, hi, lo, knee))}"
        loop = _positive_feedback(comp, main)
        if loop:
            state += f"; its output reaches its + input through {', '.join(loop)}"
    elif kind == "R":
        state = f"resistor {format_value(1.0 / p[0], 'ohm')}"
    elif kind == "I":
        state = f"current source {format_value(p[0], 'A')}"
    elif kind == "V":
        state = f"voltage source {format_value(p[0], 'V')}"
    elif kind == "E":
        state = f"controlled source, gain {p[0]:g}"
    elif kind == "L":
        state = "inductor, a short at DC"
    else:
        state = _WORDS.get(kind, kind)
    return f"{element} ({state})"


def _listing(comp: Compiled, names: list[str], x: np.ndarray) -> str:
    shown = [_describe(comp, e, x) for e in names[:MAX_LISTED]]
    if len(names) > MAX_LISTED:
        shown.append(f"and {len(names) - MAX_LISTED} more")
    return ", ".join(shown) if shown else "none"


def _positive_feedback(comp: Compiled, row: int) -> list[str]:
    """Elements along a passive DC path from op-amp *row*'s output to its + input that
    avoids ground and every node a source holds against ground (positive feedback), or
    ``[]``."""
    plus, out = int(comp.nodes[row, 0]), int(comp.nodes[row, 2])
    me = comp.row_element[row]
    held = {-1}
    for k, kind in enumerate(comp.kinds):
        a, b = int(comp.nodes[k, 0]), int(comp.nodes[k, 1])
        if kind in (_s.K_V, _s.K_VIN) and (a < 0 or b < 0):
            held.add(max(a, b))
        elif kind == _s.K_OA and k != row:
            held.add(int(comp.nodes[k, 2]))
        elif kind == _s.K_E and int(comp.nodes[k, 3]) < 0:
            held.add(int(comp.nodes[k, 2]))
    if plus in held or out < 0:
        return []
    adj: dict[int, list[tuple[int, str]]] = {}
    for k, kind in enumerate(comp.kinds):
        nd = [int(v) for v in comp.nodes[k]]
        if kind in (_s.K_R, _s.K_D, _s.K_V):
            pairs = [(nd[0], nd[1])]
        elif kind == _s.K_Q:
            pairs = [(nd[0], nd[1]), (nd[1], nd[2]), (nd[0], nd[2])]
        else:
            continue
        for u, w in pairs:
            if u in held or w in held:
                continue
            adj.setdefault(u, []).append((w, comp.row_element[k]))
            adj.setdefault(w, []).append((u, comp.row_element[k]))
    path = _path(adj, out, plus)
    return [] if not path else [e for e in dict.fromkeys(path) if e != me]


def _path(adj: dict, a: int, b: int) -> list[str] | None:
    """Element names along a path from node *a* to node *b* in *adj*, or None."""
    if a == b:
        return []
    seen, todo = {a: []}, [a]
    while todo:
        u = todo.pop()
        for v, name in adj.get(u, []):
            if v not in seen:
                seen[v] = [*seen[u], name]
                if v == b:
                    return seen[v]
                todo.append(v)
    return None


# ---- the findings ------------------------------------------------------------------------------
def _loop_of_sources(comp: Compiled) -> str:
    """A loop of voltage-defining elements, named element by element, or ``""``."""
    ground = comp.n_nodes
    adj: dict[int, list[tuple[int, str]]] = {}
    for k, kind in enumerate(comp.kinds):
        if kind in (_s.K_V, _s.K_VIN):
            a, b = int(comp.nodes[k, 0]), int(comp.nodes[k, 1])
        elif kind == _s.K_OA:
            a, b = int(comp.nodes[k, 2]), -1
        elif kind == _s.K_E:
            a, b = int(comp.nodes[k, 2]), int(comp.nodes[k, 3])
        else:
            continue
        a, b = (ground if a < 0 else a), (ground if b < 0 else b)
        name = comp.row_element[k]
        path = _path(adj, a, b)
        if path is not None:
            words = ", ".join(f"{e} ({_WORDS.get(_kind(comp, e), 'source')})"
                              for e in dict.fromkeys([*path, name]))
            return (f"{words} form a loop of voltage sources at "
                    f"{_node_label(comp, a if a != ground else b)}: the currents round it "
                    "are undefined (a resistor in the loop would define them)")
        adj.setdefault(a, []).append((b, name))
        adj.setdefault(b, []).append((a, name))
    return ""


def _floating_node(comp: Compiled) -> str:
    """A node no DC path joins to ground, with what reaches it, or ``""``."""
    ground = comp.n_nodes
    adj: dict[int, set] = {ground: set()}

    def join(a, b):
        a, b = (ground if a < 0 else int(a)), (ground if b < 0 else int(b))
        adj.setdefault(a, set()).add(b)
        adj.setdefault(b, set()).add(a)

    for k, kind in enumerate(comp.kinds):
        nd = comp.nodes[k]
        if kind in (_s.K_R, _s.K_V, _s.K_VIN, _s.K_D):
            join(nd[0], nd[1])
        elif kind == _s.K_Q:
            join(nd[0], nd[1])
            join(nd[1], nd[2])
        elif kind == _s.K_OA:
            join(nd[2], -1)
        elif kind == _s.K_E:
            join(nd[2], nd[3])
    seen, todo = {ground}, [ground]
    while todo:
        for m in adj.get(todo.pop(), ()):
            if m not in seen:
                seen.add(m)
                todo.append(m)
    x = np.zeros((1, comp.n_unknowns))
    for i in range(comp.n_nodes):
        if i not in seen:
            on = ", ".join(_describe(comp, e, x) for e in _elements_at(comp, i))
            return (f"{_node_label(comp, i)} has no DC path to ground: only {on or 'nothing'} "
                    "reach it at DC, so its voltage is undefined")
    return ""


def _singular(comp: Compiled, jac: np.ndarray, x: np.ndarray) -> str:
    """Name the unknowns along the null direction of a singular Jacobian."""
    null = np.linalg.svd(jac)[2][-1]
    top = np.flatnonzero(np.abs(null) >= 0.3 * np.max(np.abs(null)))
    nodes = [int(i) for i in top if i < comp.n_nodes]
    if nodes:
        i = max(nodes, key=lambda j: abs(null[j]))
        return (f"the Newton matrix turns singular: the voltage of {_node_label(comp, i)} "
                f"is not determined; elements there: "
                f"{_listing(comp, _elements_at(comp, i), x[None, :])}")
    currents = [comp.row_element[int(np.flatnonzero(comp.branch == i)[0])] for i in top]
    return (f"the Newton matrix turns singular: the current through "
            f"{', '.join(dict.fromkeys(currents))} is not determined")


def _unsettled(comp: Compiled, vin_v: float, x: np.ndarray, x_tail: np.ndarray,
               dx_tail: np.ndarray) -> str:
    """The node whose Newton step stayed largest over the tail, with its KCL residual, how it
    moves, and the elements on it."""
    nn, n = comp.n_nodes, comp.n_unknowns
    step = np.abs(dx_tail[:, :nn]).max(axis=0)
    f = np.zeros(n)
    _s._stamp(comp.kinds, comp.nodes, comp.params, comp.branch, nn, x, vin_v,
              np.zeros((comp.kinds.shape[0], 2)), False, 0.0, np.zeros((n, n)), f)
    res = np.abs(f[:nn])
    if step.max() > _s.ABS_TOL_V:
        near = np.flatnonzero(step >= 0.99 * step.max())
        i = int(near[np.argmax(res[near])])
    else:
        i = int(np.argmax(res))
    d = dx_tail[:, i]
    if np.all(d > 0) or np.all(d < 0):
        move = (f"Newton heads for {_v(x_tail[-1, i] + d[-1])} in steps of at most "
                f"{format_value(_s.MAX_STEP_V, 'V')} and is at {_v(x[i])} after "
                f"{_s.MAX_ITER} iterations")
    else:
        move = f"it {_span(x_tail[:, i])}"
    return (f"{_node_label(comp, i)} does not settle (KCL residual {_a(res[i])}; {move}); "
            f"elements there: {_listing(comp, _elements_at(comp, i), x_tail)}")
