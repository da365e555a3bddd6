"""Fused transfer tables and their per-pixel kernels.

Consecutive static stages of a channel fuse into one table over input volts (1-D)
or over input volts × one control value (2-D), built with the DC solver.  The build
measures its own worst linear-interpolation error against the solver at the points
half-way between grid points (in both axes for 2-D) and doubles the grid until that
error is at most the target (default 0.05 mV), so the bound stored with each table
is measured, not assumed.  Tables are float32 and read with (bi)linear interpolation;
inputs outside the table's domain are clamped to its ends (documented, and the
domain is chosen wider than any legal signal).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numba as nb
import numpy as np

from livecurve.errors import SolverError

TARGET_ERR_V = 5e-5  # 0.05 mV
N_START = 257
N_MAX = 65537
M_START = 9
M_MAX = 257
N_MAX_2D = 4097
#: Solver evaluations one 2-D table may spend.  The demo chains need under 70 000; a sweep
#: or knob range far wider than the circuit's useful range would otherwise run for minutes
#: (4097 × 257 × 2 ≈ 2.1 million solves) and still miss the goal.
MAX_SOLVES_2D = 600_000


@dataclass
class Table:
    """A uniform table y(x[, c]).

    Attributes
    ----------
    lo_v, hi_v : float
        Input domain, volts.
    values : ndarray, float32, shape (N,) or (N, M)
        Output volts at the grid; for 2-D, column j is control value c_lo + j·dc.
    c_lo, c_hi : float
        Control axis range (2-D only; equal for 1-D).
    err_v : float
        Worst measured interpolation error against the solver, volts.
    n_solves : int
        Solver evaluations spent on the build (grid + checks).
    """

    lo_v: float
    hi_v: float
    values: np.ndarray
    c_lo: float = 0.0
    c_hi: float = 0.0
    err_v: float = 0.0
    n_solves: int = 0
    c_log: bool = False  # control axis uniform in log(c) rather than in c

    def by_control(self) -> np.ndarray:
        """The 2-D values laid out (M, N), one contiguous curve per control value (cached)."""
        if getattr(self, "_vt", None) is None or self._vt.shape[1] != self.n:
            self._vt = np.ascontiguousarray(self.values.T)
        return self._vt

    def control_pos(self, c) -> np.ndarray:
        """Fractional column index of control value(s) *c* (clamped to the table)."""
        m = self.values.shape[1]
        c = np.asarray(c, dtype=np.float64)
        if self.c_log:
            lo, hi = np.log(self.c_lo), np.log(self.c_hi)
            u = (np.log(np.maximum(c, self.c_lo)) - lo) / (hi - lo)
        else:
            u = (c - self.c_lo) / (self.c_hi - self.c_lo)
        return np.clip(u * (m - 1), 0.0, m - 1.000001).astype(np.float32)

    @property
    def n(self) -> int:
        return self.values.shape[0]

    @property
    def is_2d(self) -> bool:
        return self.values.ndim == 2

    @property
    def grid_v(self) -> np.ndarray:
        return np.linspace(self.lo_v, self.hi_v, self.n)

    def out_range(self) -> tuple[float, float]:
        return float(self.values.min()), float(self.values.max())


def _interp_err(x_fine: np.ndarray, y_fine: np.ndarray) -> float:
    """Worst |linear interpolation (float32 table at even points) − solver| at odd points."""
    y32 = y_fine[::2].astype(np.float32).astype(np.float64)
    mid = 0.5 * (y32[:-1] + y32[1:])
    return float(np.max(np.abs(mid - y_fine[1::2])))


def build_table_1d(fn: Callable[[np.ndarray], np.ndarray], lo_v: float, hi_v: float, *,
                   target_v: float = TARGET_ERR_V, n_start: int = N_START,
                   n_max: int = N_MAX) -> Table:
    """Tabulate *fn* (volts → volts, vectorised, solver-backed) on [lo_v, hi_v].

    The grid doubles (n → 2n − 1, reusing every solved point) until the worst error at the
    half-way points is ≤ *target_v* or n reaches *n_max*; the measured bound is kept.
    """
    n = n_start
    x = np.linspace(lo_v, hi_v, n)
    y = fn(x)
    solves = n
    while True:
        xm = 0.5 * (x[:-1] + x[1:])
        ym = fn(xm)
        solves += xm.size
        xf = np.empty(2 * n - 1)
        yf = np.empty(2 * n - 1)
        xf[::2], xf[1::2] = x, xm
        yf[::2], yf[1::2] = y, ym
        if not np.all(np.isfinite(yf)):
            bad = float(xf[np.argmin(np.isfinite(yf))])
            raise SolverError(f"table build: the solver gave no finite output at input "
                              f"{bad:.6g} V")
        err = _interp_err(xf, yf)
        if err <= target_v or 2 * n - 1 > n_max:
            return Table(lo_v, hi_v, y.astype(np.float32), err_v=err, n_solves=solves)
        x, y, n = xf, yf, 2 * n - 1


def build_table_2d(fn: Callable[[np.ndarray, float], np.ndarray], lo_v: float, hi_v: float,
                   c_lo: float, c_hi: float, *, target_v: float = TARGET_ERR_V,
                   n_max: int = N_MAX_2D, m_max: int = M_MAX) -> Table:
    """Tabulate fn(x, c) on [lo_v, hi_v] × [c_lo, c_hi].

    The input axis size is the largest the 1-D build needs at the control ends and
    middle; the control axis then doubles until the error at control mid-points (and at
    input mid-points) is ≤ *target_v*.  A positive control range spanning more than a
    factor of 3 (currents, resistances) is gridded uniformly in log(c), where junction
    laws are smooth.
    """
    c_log = c_lo > 0 and c_hi / c_lo > 3.0

    def axis(m):
        if c_log:
            return np.exp(np.linspace(np.log(c_lo), np.log(c_hi), m))
        return np.linspace(c_lo, c_hi, m)

    def mids(cs):
        return np.sqrt(cs[:-1] * cs[1:]) if c_log else 0.5 * (cs[:-1] + cs[1:])

    n = N_START
    solves = 0
    for c in axis(3):
        # each axis gets half the target: a bilinear read adds the two axes' errors
        try:
            t = build_table_1d(lambda v, c=c: fn(v, c), lo_v, hi_v, target_v=0.5 * target_v,
                               n_max=n_max)
        except SolverError as exc:
            raise SolverError(f"{exc}, control {c:.6g}") from None
        n = max(n, t.n)
        solves += t.n_solves
    x = np.linspace(lo_v, hi_v, n)
    xm = 0.5 * (x[:-1] + x[1:])
    m = M_START

    def column(c):
        y = fn(x, c)
        if not np.all(np.isfinite(y)):
            raise SolverError(f"table build: the solver gave no finite output at input "
                              f"{float(x[np.argmin(np.isfinite(y))]):.6g} V, control {c:.6g}")
        return y

    cs = axis(m)
    cols = [column(c) for c in cs]
    solves += n * m
    while True:
        cm = mids(cs)
        mid_cols = [column(c) for c in cm]
        solves += n * len(cm)
        err, worst = 0.0, (0, 0)
        for j in range(len(cm)):
            a = cols[j].astype(np.float32).astype(np.float64)
            b = cols[j + 1].astype(np.float32).astype(np.float64)
            dev = np.abs(0.5 * (a + b) - mid_cols[j])
            k = int(np.argmax(dev))
            if dev[k] > err:
                err, worst = float(dev[k]), (k, j)
        if err <= 0.5 * target_v or 2 * m - 1 > m_max:
            break
        if solves + n * (2 * m - 2) > MAX_SOLVES_2D:
            raise SolverError(
                f"table build stopped after {solves} solver evaluations (limit "
                f"{MAX_SOLVES_2D}): at input {x[worst[0]]:.6g} V, control {cm[worst[1]]:.6g} "
                f"the table is still {err * 1e3:.3g} mV off the solver (goal "
                f"{0.5 * target_v * 1e3:.3g} mV); narrow the chain's [sweep] "
                f"({lo_v:.6g} … {hi_v:.6g} V) or the knob's min … max "
                f"({c_lo:.6g} … {c_hi:.6g})")
        merged = []
        for j in range(len(cm)):
            merged += [cols[j], mid_cols[j]]
        cols = merged + [cols[-1]]
        m = 2 * m - 1
        cs = axis(m)
    # input-axis error at the control mid-points, against the solver (checked, not assumed)
    for j in (0, len(cm) // 2, len(cm) - 1):
        cc = mids(cs[j:j + 2])[0]
        ym = fn(xm, cc)
        solves += xm.size
        a = 0.5 * (cols[j] + cols[j + 1]).astype(np.float32).astype(np.float64)
        lin = 0.5 * (a[:-1] + a[1:])
        err = max(err, float(np.max(np.abs(lin - ym))))
    values = np.ascontiguousarray(np.stack(cols, axis=1).astype(np.float32))
    return Table(lo_v, hi_v, values, c_lo, c_hi, err_v=err, n_solves=solves, c_log=c_log)


# ---- per-pixel evaluation ----------------------------------------------------------
def apply_table(plane: np.ndarray, table: Table, *, control=None, out=None) -> np.ndarray:
    """Evaluate a table on one channel plane.

    Parameters
    ----------
    plane : ndarray (H, W) float32
        Input volts.
    table : Table
    control : None, float, ndarray (H,) or ndarray (H, W)
        Control value for a 2-D table: one for the frame, one per row (line-time
        modulation) or one per pixel.  Values outside the table's control range clamp.
    out : ndarray (H, W) float32, optional
        Output buffer (may be *plane* itself).

    Returns
    -------
    ndarray (H, W) float32, volts.
    """
    if plane.dtype != np.float32 or plane.ndim != 2:
        raise TypeError("plane must be a 2-D float32 array")
    if out is None:
        out = np.empty_like(plane)
    lo = np.float32(table.lo_v)
    hi = np.float32(table.hi_v)
    inv = np.float32((table.n - 1) / (table.hi_v - table.lo_v))
    if not table.is_2d:
        _lut1d(plane, table.values, lo, hi, inv, out)
        return out
    if control is None:
        control = 0.5 * (table.c_lo + table.c_hi)
    c = np.asarray(control, dtype=np.float64)
    h = plane.shape[0]
    if c.ndim == 0:
        c = np.full(h, float(c))
    vt = table.by_control()
    if c.ndim == 1:
        if c.shape[0] != h:
            raise ValueError("control per row must have one value per row")
        _lut2d_rows(plane, vt, lo, hi, inv, table.control_pos(c), out)
        return out
    if c.shape != plane.shape:
        raise ValueError("control per pixel must have the plane's shape")
    _lut2d_pixels(plane, vt, lo, hi, inv, table.control_pos(c), out)
    return out


@nb.njit(cache=True, parallel=True, fastmath=True)
def _lut1d(x, t, lo, hi, inv, out):
    # At or beyond hi the position (x − lo)·inv can round to just below the last grid
    # point in float32; the top end is therefore decided on x itself and reads the last
    # value exactly (the low end is exact already: p clamps to 0, f = 0).
    h, w = x.shape
    top = t.shape[0] - 1
    last = np.float32(top)
    for r in nb.prange(h):
        for c in range(w):
            if x[r, c] >= hi:
                out[r, c] = t[top]
                continue
            p = (x[r, c] - lo) * inv
            p = min(max(p, np.float32(0.0)), last)
            i = min(int(p), top - 1)  # p == top reads the last interval at f = 1
            f = p - np.float32(i)
            out[r, c] = t[i] + f * (t[i + 1] - t[i])


@nb.njit(cache=True, parallel=True, fastmath=True)
def _lut2d_rows(x, t, lo, hi, inv, cpos, out):
    # t is laid out (M, N): the two curves a row needs are two contiguous rows of t
    h, w = x.shape
    top = t.shape[1] - 1
    last = np.float32(top)
    for r in nb.prange(h):
        # cpos may round up to M - 1 in float32: read the last interval at g = 1 then
        j = min(int(cpos[r]), t.shape[0] - 2)
        g = cpos[r] - np.float32(j)
        t0 = t[j]
        t1 = t[j + 1]
        for c in range(w):
            if x[r, c] >= hi:  # top end decided on x (see _lut1d)
                out[r, c] = t0[top] + g * (t1[top] - t0[top])
                continue
            p = (x[r, c] - lo) * inv
            p = min(max(p, np.float32(0.0)), last)
            i = min(int(p), top - 1)
            f = p - np.float32(i)
            a = t0[i] + g * (t1[i] - t0[i])
            b = t0[i + 1] + g * (t1[i + 1] - t0[i + 1])
            out[r, c] = a + f * (b - a)


@nb.njit(cache=True, parallel=True, fastmath=True)
def _lut2d_pixels(x, t, lo, hi, inv, cpos, out):
    h, w = x.shape
    top = t.shape[1] - 1
    last = np.float32(top)
    for r in nb.prange(h):
        for c in range(w):
            j = min(int(cpos[r, c]), t.shape[0] - 2)
            g = cpos[r, c] - np.float32(j)
            if x[r, c] >= hi:  # top end decided on x (see _lut1d)
                out[r, c] = t[j, top] + g * (t[j + 1, top] - t[j, top])
                continue
            p = (x[r, c] - lo) * inv
            p = min(max(p, np.float32(0.0)), last)
            i = min(int(p), top - 1)
            f = p - np.float32(i)
            a = t[j, i] + g * (t[j + 1, i] - t[j, i])
            b = t[j, i + 1] + g * (t[j + 1, i + 1] - t[j, i + 1])
            out[r, c] = a + f * (b - a)
