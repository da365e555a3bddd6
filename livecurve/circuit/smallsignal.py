"""Small-signal dynamics of a stage netlist at its DC operating point.

The DC solver (:mod:`livecurve.circuit.solver`) gives the operating point and, from the
same stamps, the Jacobian J of the MNA equations f(x, u) = 0 there (every junction's
conductance, every op-amp's slope of its law).  Reactive parts add a matrix E of the
time derivatives, giving the linear descriptor system (modified nodal analysis with
energy-storage elements; Ho, Ruehli & Brennan 1975; any circuit-simulation text, e.g.
Vlach & Singhal, from memory)::

    E·dx/dt + J·x + b·u = 0,        y = x[out]

* capacitor C between a and b: a current C·d(va − vb)/dt leaving a (E gets ±C);
* inductor L: a 0 V source at DC whose branch equation becomes va − vb − L·di/dt = 0;
* op-amp with a gain-bandwidth product GBW and open-loop gain A0: a single pole
  A(s) = A0/(1 + s/ωa), ωa = 2π·GBW/A0 (any op-amp text).  Its open-loop drive
  w = A0·(v+ − v− + Vos) becomes a state, τ·dw/dt + w = A0·(v+ − v− + Vos), τ = 1/ωa, and
  the output follows the law's slope at the operating point: δout = slope·δw.

b = ∂f/∂u holds the input source's column.  The frequency response is
H(jω) = −c·(J + jω·E)⁻¹·b.  :func:`state_space` reduces the descriptor system to
dx/dt = A·x + B·u, y = C·x + D·u by splitting E with its singular value decomposition
and eliminating the algebraic part (index-1 systems: every state is a capacitor voltage,
an inductor current or an op-amp pole).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from livecurve.circuit import solver as _s
from livecurve.circuit.devices import T_NOM_K
from livecurve.circuit.netlist import Netlist, opamp_slope, solve_sweep
from livecurve.errors import ConfigError


@dataclass(frozen=True)
class Linearised:
    """A stage linearised at one input voltage.

    Attributes
    ----------
    e, j : ndarray (n, n)
        Derivative and Jacobian matrices of the descriptor system.
    b : ndarray (n,)
        ∂f/∂u, the input's column.
    out : int
        Index of the output node's voltage in x.
    x_op : ndarray
        The DC operating point (node voltages, branch currents, op-amp drives).
    vin_v : float
        Input voltage of the operating point.
    """

    e: np.ndarray
    j: np.ndarray
    b: np.ndarray
    out: int
    x_op: np.ndarray
    vin_v: float

    @property
    def dc_gain(self) -> float:
        """dVout/dVin at the operating point (the slope of the static curve)."""
        return float(-np.linalg.solve(self.j, self.b)[self.out])

    def response(self, f_hz) -> np.ndarray:
        """Complex H(j·2πf) = −c·(J + jωE)⁻¹·b, straight from the descriptor system."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=np.float64))
        h = np.array([-np.linalg.solve(self.j + 2j * math.pi * ff * self.e, self.b)[self.out]
                      for ff in f])
        return h if np.ndim(f_hz) else h[0]


def is_reactive(net: Netlist) -> bool:
    """True if the netlist has a capacitor, an inductor or an op-amp with a GBW."""
    return any(el.kind in ("C", "L") or (el.kind == "OA" and el.extra.get("gbw"))
               for el in net.elements)


def linearise(net: Netlist, *, vin_v: float = 0.0, t_kelvin: float = T_NOM_K) -> Linearised:
    """The descriptor system of *net* at the operating point for input *vin_v*.

    Parameters
    ----------
    net : Netlist
    vin_v : float
        Input voltage of the operating point, volts.
    t_kelvin : float
        Junction temperature, kelvin.
    """
    comp = net.compile(t_kelvin)
    x = solve_sweep(comp, [vin_v], node="*")[0]
    n0 = comp.n_unknowns
    jac = np.zeros((n0, n0))
    f = np.zeros(n0)
    vj = np.zeros((comp.kinds.shape[0], 2))
    # exact Jacobian (no junction or op-amp limiting) at the solution
    _s._stamp(comp.kinds, comp.nodes, comp.params, comp.branch, comp.n_nodes, x, vin_v, vj,
              False, 0.0, jac, f)
    b = np.zeros(n0)
    vin_row = [k for k in range(comp.kinds.shape[0]) if comp.kinds[k] == _s.K_VIN]
    b[comp.branch[vin_row[0]]] = -1.0  # branch equation v(in) − u = 0
    rows = comp.element_rows
    poles = [el for el in net.elements if el.kind == "OA" and el.extra.get("gbw")]
    n = n0 + len(poles)
    e = np.zeros((n, n))
    jj = np.zeros((n, n))
    jj[:n0, :n0] = jac
    bb = np.zeros(n)
    bb[:n0] = b
    idx = comp.node_index

    def node(name):
        return -1 if name not in idx else idx[name]

    for el in net.elements:
        if el.kind == "C":
            a, c = node(el.nodes[0]), node(el.nodes[1])
            for r, sr in ((a, 1.0), (c, -1.0)):
                if r < 0:
                    continue
                if a >= 0:
                    e[r, a] += sr * el.value
                if c >= 0:
                    e[r, c] -= sr * el.value
        elif el.kind == "L":
            br = comp.branch[rows[el.name]]
            e[br, br] = -el.value
    drives = []
    for m, el in enumerate(poles):
        k = rows[el.name]
        br = comp.branch[k]
        w = n0 + m
        a, c = comp.nodes[k, 0], comp.nodes[k, 1]
        a_ol = el.value
        drive = a_ol * ((x[a] if a >= 0 else 0.0) - (x[c] if c >= 0 else 0.0) + el.extra["vos"])
        drives.append(drive)
        slope = opamp_slope(drive, el.extra["hi"], el.extra["lo"], el.extra["knee"])
        # the branch row no longer sees v+ − v− directly (undo the solver's stamp of
        # −A·slope, +A·slope), only the drive state w
        if a >= 0:
            jj[br, a] += a_ol * slope
        if c >= 0:
            jj[br, c] -= a_ol * slope
        jj[br, w] = -slope
        tau = a_ol / (2.0 * math.pi * el.extra["gbw"])
        e[w, w] = tau
        jj[w, w] = 1.0
        if a >= 0:
            jj[w, a] = -a_ol
        if c >= 0:
            jj[w, c] += a_ol
    x_full = np.concatenate([x, drives])
    return Linearised(e, jj, bb, comp.out_index, x_full, float(vin_v))


def state_space(lin: Linearised, *, rank_tol: float = 1e-12):
    """(A, B, C, D) of the linearised stage: dx/dt = A·x + B·u, y = C·x + D·u.

    E = U·Σ·Vᵀ splits the unknowns into dynamic (Σ > 0) and algebraic parts; the
    algebraic equations are solved for their unknowns and substituted (index-1
    descriptor system).  Raises ConfigError if the algebraic part is singular (e.g. a
    capacitor straight across the input source, or a loop of inductors and sources).
    """
    u_, sv, vt = np.linalg.svd(lin.e)
    if sv.size == 0 or sv[0] == 0.0:
        return (np.zeros((0, 0)), np.zeros(0), np.zeros(0), lin.dc_gain)
    r = int(np.sum(sv > rank_tol * sv[0]))
    # E·ẋ + J·x + b·u = 0 in coordinates x = V·z, premultiplied by Uᵀ
    jz = u_.T @ lin.j @ vt.T
    bz = u_.T @ lin.b
    j11, j12, j21, j22 = jz[:r, :r], jz[:r, r:], jz[r:, :r], jz[r:, r:]
    b1, b2 = bz[:r], bz[r:]
    if j22.size and np.linalg.cond(j22) > 1e14:
        raise ConfigError("the stage's reactive elements form a loop with a source or "
                          "an ideal element (no resistive path): its dynamics are not "
                          "defined", key="netlist")
    s_inv = 1.0 / sv[:r]
    if j22.size:
        k21 = np.linalg.solve(j22, j21)
        kb2 = np.linalg.solve(j22, b2)
    else:
        k21 = np.zeros((0, r))
        kb2 = np.zeros(0)
    a = -(s_inv[:, None] * (j11 - j12 @ k21))
    b = -(s_inv * (b1 - j12 @ kb2))
    cz = vt.T[lin.out]             # y = x[out] = (V·z)[out]
    c = cz[:r] - cz[r:] @ k21
    d = float(-(cz[r:] @ kb2))
    return a, b, c, d
