"""Line-rate dynamics derived from a stage's own schematic.

:mod:`livecurve.circuit.smallsignal` linearises a stage netlist at its operating point
(capacitors, inductors, op-amp gain-bandwidth) and reduces it to state space; here that
system is normalised to unity DC gain (the static curve carries the gain) and realised
as a line filter: the exact zero-order-hold discretisation of the whole system at the
pixel clock, output at the end of each pixel, factored into cascaded sections of at most
two states (the blocks :mod:`livecurve.engine.linefilters` runs).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from livecurve.engine import linefilters as _lf
from livecurve.engine.dynamics import _first_3db, pack_block
from livecurve.engine.linefilters import LineFilter
from livecurve.errors import ConfigError

__all__ = ["SchematicDynamics", "schematic_dynamics", "schematic_filter"]


@dataclass(frozen=True)
class SchematicDynamics:
    """A stage's small-signal dynamics from its own schematic, normalised to unity DC gain.

    Built by :func:`schematic_dynamics` from the stage netlist's capacitors, inductors and
    op-amp gain-bandwidth, linearised at an operating point; the static curve (the DC
    solver's tables) carries the stage's gain, this carries only the shape in time.
    Matrices are kept as tuples so the object is hashable (engines cache filters by it).

    Parameters
    ----------
    a : tuple of tuples (n, n)
    b, c : tuple (n,)
    d : float
        dx/dt = A·x + B·u, y = C·x + D·u, with C·(−A)⁻¹·B + D = 1.
    dc_gain : float
        The stage's small-signal gain at the operating point (before normalising).
    vin_v : float
        Input voltage of the operating point.
    label : str
    """

    a: tuple
    b: tuple
    c: tuple
    d: float
    dc_gain: float
    vin_v: float = 0.0
    label: str = "schematic"

    @property
    def matrices(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
        """(A, B, C, D) as arrays."""
        n = len(self.b)
        return (np.array(self.a, dtype=np.float64).reshape(n, n), np.array(self.b, dtype=float),
                np.array(self.c, dtype=float), float(self.d))

    @property
    def sections(self) -> list:
        """No hand sections: the whole schematic is one system."""
        return []

    def response(self, f_hz) -> np.ndarray:
        """Continuous H(j·2πf) (unity at DC)."""
        a, b, c, d = self.matrices
        f = np.atleast_1d(np.asarray(f_hz, dtype=np.float64))
        eye = np.eye(a.shape[0])
        h = np.array([c @ np.linalg.solve(2j * math.pi * ff * eye - a, b) + d for ff in f])
        return h if np.ndim(f_hz) else h[0]

    @property
    def bandwidth_3db_hz(self) -> float:
        """−3 dB frequency of the continuous model, Hz (inf if none)."""
        return _first_3db(lambda f: np.abs(self.response(f)), math.inf)


def schematic_dynamics(net, *, vin_v: float = 0.0, t_kelvin: float | None = None
                       ) -> SchematicDynamics | None:
    """Dynamics of a stage netlist from its schematic, or None when it has no reactive part.

    Parameters
    ----------
    net : livecurve.circuit.netlist.Netlist
    vin_v : float
        Input volts of the operating point the stage is linearised at.
    t_kelvin : float, optional
        Junction temperature (default TNOM, 27 °C).
    """
    from livecurve.circuit import smallsignal
    from livecurve.circuit.devices import T_NOM_K
    if not smallsignal.is_reactive(net):
        return None
    lin = smallsignal.linearise(net, vin_v=vin_v,
                                t_kelvin=T_NOM_K if t_kelvin is None else t_kelvin)
    a, b, c, d = smallsignal.state_space(lin)
    g = lin.dc_gain
    if not (math.isfinite(g) and abs(g) > 1e-9):
        raise ConfigError("the stage has no DC gain at its operating point (an output "
                          "clipped at a limit, or a series capacitor): its dynamics cannot "
                          "be split from a static curve", key=f"{net.name}", value=g)
    if a.shape[0] and np.max(np.real(np.linalg.eigvals(a))) >= 0.0:
        raise ConfigError("the stage is unstable at its operating point (a pole in the "
                          "right half-plane): it would oscillate", key=f"{net.name}")
    return SchematicDynamics(tuple(map(tuple, a / 1.0)), tuple(b / g), tuple(c), d / g, g,
                             float(vin_v), f"schematic of '{net.name}' ({a.shape[0]} states)")


def _fast_coordinates(phi: np.ndarray, c: np.ndarray) -> np.ndarray | None:
    """T (n, n) with last row C and, for n = 3, first row a real left eigenvector of Φ
    (so x'0 evolves on its own), or None when no well-conditioned T exists."""
    n = phi.shape[0]
    if n > 3 or not np.any(c):
        return None
    if n == 3:
        lam, vecs = np.linalg.eig(phi.T)
        real = [i for i in range(3) if abs(lam[i].imag) < 1e-12]
        if not real:
            return None
        first = [np.real(vecs[:, real[0]])]
    else:
        first = []
    best, best_det = None, 0.0
    for k in range(n):
        rows = [*first, *[np.eye(n)[i] for i in range(n) if i != k]][:n - 1]
        tr = np.vstack([*rows, c[None, :]])
        det = abs(np.linalg.det(tr)) / np.prod(np.linalg.norm(tr, axis=1))
        if det > best_det:
            best, best_det = tr, det
    return best if best_det > 1e-6 else None


def schematic_filter(dyn: SchematicDynamics, t: float) -> LineFilter:
    """The line filter of *dyn* at pixel period *t* (seconds).

    Exact ZOH discretisation of the whole schematic system, output at the end of each
    pixel (y[n] = C·x[n+1] + D·u[n]), factored into cascaded sections of ≤ 2 states with
    unity DC gain each (pole/zero pairs, scipy.signal.zpk2sos).  The cascade of discrete
    sections is the same discrete system (no approximation beyond rounding).
    """
    from scipy import signal  # here, not at import (start-up time of every command)
    from scipy.linalg import expm
    a, b, c, d = dyn.matrices
    n = a.shape[0]
    if n == 0:
        return LineFilter(np.zeros((0, _lf.N_COEF)), t, "zoh", (dyn.label,))
    aug = np.zeros((n + 1, n + 1))
    aug[:n, :n], aug[:n, n] = a, b
    m = expm(aug * t)
    phi, gam = m[:n, :n], m[:n, n]
    tr = _fast_coordinates(phi, c) if d == 0.0 else None
    if tr is not None:
        # one block in the end-of-pixel form, in coordinates x' = T·x whose last state is
        # the output (and, for three states, whose first state is a real mode on its
        # own): the kernel's fast paths
        tinv = np.linalg.inv(tr)
        lin = np.hstack([tr @ phi @ tinv, (tr @ gam)[:, None]])
        lin[0, 1:n][np.abs(lin[0, 1:n]) < 1e-13] = 0.0
        row = pack_block(lin=lin, c=np.eye(n)[n - 1], d=0.0, end_state=True)
        return LineFilter(row[None, :], t, "zoh", (dyn.label,))
    cd, dd = c @ phi, float(c @ gam + d)
    z, p, k = signal.ss2zpk(phi, gam[:, None], cd[None, :], np.array([[dd]]))
    z = z[np.isfinite(z)]
    sos = signal.zpk2sos(z, p, k)
    rows = []
    for sec in sos:
        num, den = sec[:3], sec[3:]
        gain = num.sum() / den.sum()
        if not (math.isfinite(gain) and abs(gain) > 1e-12):
            raise ConfigError("a section of the stage's filter has no DC gain", key=dyn.label)
        num = num / gain
        order = 2 if (abs(den[2]) > 0 or abs(num[2]) > 0) else 1
        if order == 1:
            # y = b0·u + b1·u[-1] − a1·y[-1]: x[n+1] = −a1·x + u, y = (b1 − a1·b0)·x + b0·u
            rows.append(pack_block(lin=[[-den[1], 1.0]], c=[num[1] - den[1] * num[0]],
                                   d=num[0], end_state=False))
        else:
            a_s, b_s, c_s, d_s = signal.tf2ss(num, den)
            rows.append(pack_block(lin=np.hstack([a_s, b_s]), c=c_s[0], d=float(d_s[0, 0]),
                                   end_state=False))
    return LineFilter(np.array(rows), t, "zoh", (dyn.label,))
