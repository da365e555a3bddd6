"""Recursive state-space filters run along every scan line of a channel plane.

A :class:`LineFilter` is a cascade of *blocks*; a block is one linear
time-invariant system of up to three states, discretised for one sample per
pixel, whose first state may be rate-limited.  :mod:`livecurve.engine.dynamics`
builds them from an op-amp stage's bandwidth, slew rate and parasitic
resonance; this module only stores and runs them.

Sources
-------
* Exact zero-order-hold (ZOH) discretisation of ẋ = A·x + B·u: Φ = e^{AT},
  Γ = ∫₀ᵀ e^{As} ds·B, obtained together as the matrix exponential of the
  augmented matrix [[A, B], [0, 0]]·T (any discrete-time control text; the
  method of ``scipy.signal.cont2discrete(..., method='zoh')``).
* Sample timing: one sample per pixel at the format's pixel clock, e.g. 74.25 MHz
  for 1080p30 (SMPTE ST 274).

Recursion
---------
Linear mode, per sample n (x: states, u: input held over the pixel):

    x[n+1] = Φ·x[n] + Γ·u[n]                                   (1)
    y[n]   = C·x[n+1]          (ZOH: output at the end of the pixel)
    y[n]   = C·x[n] + D·u[n]   (bilinear / Tustin)              (2)

Rate limit (ZOH only).  The first state's derivative, d0 = A[0]·x + B[0]·u, is
clipped to ±SR.  While the limit holds, ẋ0 = ±SR is a constant and the other
states respond to that ramp; this is again linear in (x, u, ±SR) and is
discretised exactly the same way (augmented matrix with x0's row replaced by
the constant rate), giving a slewing map Σ:

    x[n+1] = Σx·x[n] + Σu·u[n] + Σc·(±SR)                       (3)

The mode is chosen from d0 at the start of a sample and checked at its end.  In
a sample where it changes, the switching time is put on a grid of T/G
(``N_GRID`` = G; both maps are stored for every t = m·T/G): found by bisection
over m, the old mode's map for the switching time, then the new mode's map for
the rest (about log2(G) + 2 map products).  Only the switching time is
approximate, to within T/G; a second switch inside the same sample is not
resolved.  A one-state block is solved exactly instead: slewing for
t1 = (|u − x| − E)/SR with E = SR/k, then decaying as e^{−k(T − t1)} (4); a
one-state section followed by a resonance uses that exact t1 for the grid.

Coordinates and exactness
-------------------------
The kernel works in volts measured from the blanking level (v − blank) and
starts every row from the all-zero state, i.e. the steady state of a line that
has sat at blanking for ever (every block has unity DC gain).  A row that stays
at blanking is then exactly zero in every state, so a flat field at blanking
comes back bit for bit.  States and arithmetic are float64; planes are float32.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from livecurve.errors import ConfigError, MediaError

#: Largest number of states in one block (a one- or two-state op-amp section plus,
#: for the one-state section, a two-state resonance).
NMAX = 3
#: A rate-limited block puts a change of mode inside a sample on a grid of T / N_GRID.
N_GRID = 32
#: Rows filtered together by one thread: their recursions are independent, so
#: interleaving them hides each row's dependency chain (about 2× faster here
#: than one row at a time).  The kernel's loops are written out for four rows.
_ROWS = 4

# Layout of one block's row in LineFilter.coef (float64); dynamics.pack_block fills it.
MAP_LEN = NMAX * (NMAX + 2)        # one map: NMAX rows of [x (NMAX) | u | c]
K_N, K_SLEW, K_END, K_E, K_STEP = 0, 1, 2, 3, 4      # states, SR (V/s, 0: none), ZOH?, E, SR·T
K_DI = 5                           # index i of the state in the demand k·(u − x_i)
K_C = 6                            # output row C (NMAX) then D
K_DEM = K_C + NMAX + 1             # demand row A[0] (NMAX) then B[0]
K_LIN = K_DEM + NMAX + 1           # linear map [Φ | Γ | 0]
K_SLW = K_LIN + MAP_LEN                 # slewing map [Σx | Σu | Σc]
K_LIN_G = K_SLW + MAP_LEN               # linear maps for m·T/N_GRID, m = 1 … N_GRID − 1
K_SLW_G = K_LIN_G + (N_GRID - 1) * MAP_LEN  # slewing maps for the same times
N_COEF = K_SLW_G + (N_GRID - 1) * MAP_LEN

METHODS = ("zoh", "bilinear")


@dataclass(frozen=True)
class LineFilter:
    """A cascade of discrete blocks with unity DC gain, ready for :func:`apply_line_filter`.

    Parameters
    ----------
    coef : ndarray, shape (n_blocks, N_COEF), float64
        One row per block in the layout above (built by
        :func:`livecurve.engine.dynamics.pack_block`).
    pixel_period_s : float
        Sample period the coefficients were computed for, seconds.
    method : {"zoh", "bilinear"}
        Discretisation used.
    labels : tuple of str
        Human-readable description of the sections, for chain summaries.
    """

    coef: np.ndarray
    pixel_period_s: float
    method: str
    labels: tuple[str, ...] = ()

    def __post_init__(self):
        coef = np.array(self.coef, dtype=np.float64, order="C", ndmin=2)
        if coef.size == 0:
            coef = np.zeros((0, N_COEF))
        if coef.ndim != 2 or coef.shape[1] != N_COEF:
            raise ConfigError(f"line filter coefficients must have shape (n, {N_COEF})",
                              key="coef", value=coef.shape)
        if not np.all(np.isfinite(coef)):
            raise ConfigError("line filter coefficients must be finite", key="coef")
        if not np.all(np.isin(coef[:, K_N], np.arange(1, NMAX + 1))):
            raise ConfigError(f"a block has 1…{NMAX} states", key="coef",
                              value=coef[:, K_N].tolist())
        if self.method not in METHODS:
            raise ConfigError(f"unknown method; accepted: {', '.join(METHODS)}",
                              key="method", value=self.method)
        if self.method != "zoh" and np.any(coef[:, K_SLEW] > 0):
            raise ConfigError("rate-limited blocks need method 'zoh'", key="method",
                              value=self.method)
        coef.setflags(write=False)
        object.__setattr__(self, "coef", coef)
        object.__setattr__(self, "pixel_period_s", float(self.pixel_period_s))
        object.__setattr__(self, "labels", tuple(self.labels))

    @property
    def n_blocks(self) -> int:
        """Number of blocks (0 means the identity)."""
        return int(self.coef.shape[0])

    @property
    def rate_limited(self) -> bool:
        """True when any block carries a slew-rate limit (the filter is not linear)."""
        return bool(np.any(self.coef[:, K_SLEW] > 0))

    def block(self, i: int) -> dict:
        """Matrices of block *i*: ``phi`` (n, n), ``gamma`` (n,), ``c`` (n,), ``d``, ``n``,
        ``end_state``."""
        row = self.coef[i]
        n = int(row[K_N])
        lin = row[K_LIN:K_LIN + MAP_LEN].reshape(NMAX, NMAX + 2)
        return {"n": n, "phi": lin[:n, :n].copy(), "gamma": lin[:n, NMAX].copy(),
                "c": row[K_C:K_C + n].copy(), "d": float(row[K_C + NMAX]),
                "end_state": bool(row[K_END])}

    def response(self, f_hz) -> np.ndarray:
        """Small-signal frequency response H(e^{j2πfT}) of the cascade (slew ignored).

        ZOH blocks: H = z·C(zI − Φ)⁻¹Γ (output at the end of the pixel);
        bilinear blocks: H = C(zI − Φ)⁻¹Γ + D.
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=np.float64))
        z = np.exp(2j * math.pi * f * self.pixel_period_s)
        h = np.ones_like(z)
        for i in range(self.n_blocks):
            b = self.block(i)
            eye = np.eye(b["n"])
            g = np.array([b["c"] @ np.linalg.solve(zz * eye - b["phi"], b["gamma"]) for zz in z])
            h = h * (z * g if b["end_state"] else g + b["d"])
        return h if np.ndim(f_hz) else h[0]

    def memory_samples(self, *, tol: float = 1e-4) -> int:
        """Samples after which the slowest mode has decayed below *tol*.

        Rows are filtered independently from the blanking steady state; in the
        real circuit a line's right edge still rings into the next line only when
        this figure exceeds the horizontal blanking interval (280 samples at
        1080p30, SMPTE ST 274).
        """
        worst = 0.0
        for i in range(self.n_blocks):
            worst = max(worst, float(np.max(np.abs(np.linalg.eigvals(self.block(i)["phi"])))))
        if worst <= 0.0:
            return 0
        if worst >= 1.0:
            return np.iinfo(np.int64).max
        return int(math.ceil(math.log(tol) / math.log(worst)))


def apply_line_filter(planes_channel, lf: LineFilter, *, blank_level_v: float,
                      lead_in_samples: int = 0, out=None) -> np.ndarray:
    """Run a line filter along every row of one channel plane.

    Each row starts in the steady state of the blanking level, i.e. as if the
    line had been at ``blank_level_v`` for ever, so the picture's left edge
    shows the step up from blanking.  The ``lead_in_samples`` of blanking that
    precede the active line in the video timing would leave that steady state
    unchanged bit for bit (module docstring), so they are not run; the argument
    is checked and kept so callers pass the clip's timing through unchanged.

    Parameters
    ----------
    planes_channel : ndarray, shape (H, W)
        One channel, volts; converted to C-contiguous float32 if it is not.
    lf : LineFilter
        From :func:`livecurve.engine.dynamics.discretise`.
    blank_level_v : float
        Level of the line before its first active sample, volts; rounded to
        float32 like the plane, so a plane sample equal to it is at rest.
    lead_in_samples : int, optional
        Blanking samples before the active line (e.g. 280 at 1080p30); >= 0.
    out : ndarray, shape (H, W), float32, optional
        Destination; may be *planes_channel* itself (every sample is read
        before it is written).

    Returns
    -------
    ndarray, shape (H, W), float32
        Filtered plane, volts (``out`` when given).

    Raises
    ------
    ConfigError
        Bad filter or arguments.
    MediaError
        The plane holds NaN or infinite samples.
    """
    if not isinstance(lf, LineFilter):
        raise ConfigError("expected a LineFilter from dynamics.discretise()", key="lf",
                          value=type(lf).__name__)
    src = np.asarray(planes_channel)
    if src.ndim != 2:
        raise ConfigError("a channel plane must have shape (H, W)", key="planes_channel",
                          value=src.shape)
    src = np.ascontiguousarray(src, dtype=np.float32)
    blank = float(np.float32(blank_level_v))  # as a float32 plane holds it
    if not math.isfinite(blank):
        raise ConfigError("blanking level must be finite", key="blank_level_v",
                          value=blank_level_v)
    if isinstance(lead_in_samples, bool) or int(lead_in_samples) != lead_in_samples \
            or lead_in_samples < 0:
        raise ConfigError("lead-in must be a whole number of samples >= 0",
                          key="lead_in_samples", value=lead_in_samples)
    if out is None:
        out = np.empty_like(src)
    elif (not isinstance(out, np.ndarray) or out.dtype != np.float32 or out.shape != src.shape
          or not out.flags.c_contiguous or not out.flags.writeable):
        raise ConfigError(f"out must be a writable C-contiguous float32 array of shape "
                          f"{src.shape}", key="out")
    bad_rows = np.zeros(src.shape[0], dtype=np.uint8)
    _line_filter(src, src.view(np.uint32), lf.coef, blank, out, bad_rows,
                 4 * numba.get_num_threads())
    if bad_rows.any():
        rows = np.flatnonzero(bad_rows)
        raise MediaError(f"channel plane has NaN or infinite samples in {rows.size} row(s), "
                         f"first row {int(rows[0])}; line filters need finite volts")
    return out


# ------------------------------------------------------------------ kernels


@numba.njit(cache=True)
def _one_state_slew(x, u, a, e_slew, step):
    """Exact ZOH sample of dx/dt = clip(k(u − x), ±SR) (eq. 4).

    |u − x| <= E = SR/k: linear decay, x → u − a·(u − x), a = e^{−kT}.
    Otherwise the block slews for t1 = (|u − x| − E)/SR; if t1 >= T it moves by
    SR·T, else it slews t1 and decays for T − t1:
    x += s·[(|e| − E) + E·(1 − e^{−k(T − t1)})],  k(T − t1) = (SR·T − (|e| − E))/E,
    using k·T = SR·T/E (so no exp() can overflow).  E = 0 is a pure rate limit.
    """
    d = u - x
    ad = abs(d)
    if ad <= e_slew:
        return u - a * d
    s = 1.0 if d > 0.0 else -1.0
    over = ad - e_slew
    if over >= step or e_slew == 0.0:
        return x + s * min(over, step)
    return x + s * (over + e_slew * (1.0 - math.exp((over - step) / e_slew)))


@numba.njit(cache=True)
def _apply_map(cf, k0, x, u, c, xn):
    """xn = M·[x | u | c] for the map stored at cf[k0:] (eqs. 1 and 3).

    Always NMAX states: rows and columns past a block's n are stored as zeros,
    and fixed loop bounds let the compiler unroll.
    """
    for i in range(NMAX):
        base = k0 + i * (NMAX + 2)
        xn[i] = (cf[base + NMAX] * u + cf[base + NMAX + 1] * c + cf[base] * x[0]
                 + cf[base + 1] * x[1] + cf[base + 2] * x[2])


@numba.njit(cache=True)
def _demand(cf, x, u):
    """Derivative the first state asks for, A[0]·x + B[0]·u, V/s (zeros past n)."""
    return (cf[K_DEM + NMAX] * u + cf[K_DEM] * x[0] + cf[K_DEM + 1] * x[1]
            + cf[K_DEM + 2] * x[2])


@numba.njit(cache=True)
def _mode_map(cf, m, x, u, c, xn):
    """Apply the linear (c = 0) or slewing (c = ±SR) map for t = m·T/N_GRID, 1 <= m <= N_GRID."""
    if c == 0.0:
        k0 = K_LIN if m == N_GRID else K_LIN_G + (m - 1) * MAP_LEN
    else:
        k0 = K_SLW if m == N_GRID else K_SLW_G + (m - 1) * MAP_LEN
    _apply_map(cf, k0, x, u, c, xn)


@numba.njit(cache=True)
def _generic_sample(cf, x, xn, u):
    """Advance block states *x* by one sample in place (eqs. 1, 3); *xn* is scratch."""
    sr = cf[K_SLEW]
    if sr <= 0.0:
        _apply_map(cf, K_LIN, x, u, 0.0, xn)
        for k in range(NMAX):
            x[k] = xn[k]
        return
    d0 = _demand(cf, x, u)
    if abs(d0) > sr:
        c = sr if d0 > 0.0 else -sr
        _apply_map(cf, K_SLW, x, u, c, xn)
        keep = c * _demand(cf, xn, u) > sr * sr      # still slewing the same way
    else:
        _apply_map(cf, K_LIN, x, u, 0.0, xn)
        keep = abs(_demand(cf, xn, u)) <= sr         # still linear
    if keep:
        for k in range(NMAX):
            x[k] = xn[k]
        return
    # The mode changes inside this sample: bisection for the last grid time m·T/G
    # at which the old mode still holds (it holds at 0 and not at T).
    mode = 0.0 if abs(d0) <= sr else (1.0 if d0 > 0.0 else -1.0)
    lo = 0
    hi = N_GRID
    while hi - lo > 1:
        mid = (lo + hi) // 2
        _mode_map(cf, mid, x, u, mode * sr, xn)
        d1 = _demand(cf, xn, u)
        if (abs(d1) <= sr) if mode == 0.0 else (mode * d1 > sr):
            lo = mid
        else:
            hi = mid
    if lo > 0:
        _mode_map(cf, lo, x, u, mode * sr, xn)
        for k in range(NMAX):
            x[k] = xn[k]
    # the rest of the sample in the new mode
    d1 = _demand(cf, x, u)
    new_c = (sr if d1 > 0.0 else -sr) if mode == 0.0 else 0.0
    _mode_map(cf, N_GRID - lo, x, u, new_c, xn)
    for k in range(NMAX):
        x[k] = xn[k]


@numba.njit(cache=True)
def _slow_sample(cf, x0, x1, x2, u, xs, xn):
    """Rate-limited sample through the array path; returns the three new states."""
    xs[0] = x0
    xs[1] = x1
    xs[2] = x2
    _generic_sample(cf, xs, xn, u)
    return xs[0], xs[1], xs[2]


@numba.njit(cache=True)
def _tri_switch(cf, x0, x1, x2, u, xs, xn):
    """Sample of a one-state op-amp section + resonance that stops slewing inside it.

    The section's error u − x0 shrinks at SR until it equals E, at t1 =
    (|u − x0| − E)/SR (exact, eq. 4).  The resonance sees the ramp for t1 and the
    exponential approach after it: the slewing map for t1 then the linear map
    for T − t1, with t1 rounded to the T/N_GRID grid.  The section's own state
    is then set to its exact value.
    """
    d = u - x0
    sr = cf[K_SLEW]
    m = int((abs(d) - cf[K_E]) / cf[K_STEP] * N_GRID + 0.5)   # slewing part, grid steps
    m = min(max(m, 0), N_GRID)
    xs[0] = x0
    xs[1] = x1
    xs[2] = x2
    if m > 0:
        _mode_map(cf, m, xs, u, sr if d > 0.0 else -sr, xn)
        for k in range(NMAX):
            xs[k] = xn[k]
    if m < N_GRID:
        _mode_map(cf, N_GRID - m, xs, u, 0.0, xn)
        for k in range(NMAX):
            xs[k] = xn[k]
    return (_one_state_slew(x0, u, cf[K_LIN], cf[K_E], cf[K_STEP]), xs[1], xs[2])


@numba.njit(cache=True)
def _lin2(a11, a12, a21, a22, g1, g2, sg, di, e_slew, x0, x1, u):
    """One ZOH sample of a two-state block held in registers (eqs. 1, 3).

    Without a rate limit (E = 0) this is eq. (1).  With one, the demand
    k·(u − x_di) decides the mode at the start of the sample (|u − x_di| > E =
    SR/k: slewing map *sg* = (Σ rows as [x0, x1, u, c]) with c = ±SR, eq. 3).
    Returns the new states and whether the mode differs at the end of the
    sample; such a sample must be redone by :func:`_slow_sample` (bisection,
    eq. 3).  That call is kept out of this function so that it inlines.
    """
    if e_slew > 0.0:
        d = u - (x0 if di == 0 else x1)
        if abs(d) > e_slew:
            c = sg[8] if d > 0.0 else -sg[8]
            y0 = sg[2] * u + sg[3] * c + sg[0] * x0 + sg[1] * x1
            y1 = sg[6] * u + sg[7] * c + sg[4] * x0 + sg[5] * x1
            d_end = u - (y0 if di == 0 else y1)
            return y0, y1, not (d_end * d > 0.0 and abs(d_end) > e_slew)
    y0 = g1 * u + a11 * x0 + a12 * x1      # input term first: off the recursion's path
    y1 = g2 * u + a21 * x0 + a22 * x1
    touched = False
    if e_slew > 0.0:
        touched = abs(u - (y0 if di == 0 else y1)) > e_slew
    return y0, y1, touched


@numba.njit(cache=True)
def _lin3t(a11, a21, a22, a23, a31, a32, a33, g1, g2, g3, sg, e_slew, x0, x1, x2, u):
    """Three-state :func:`_lin2` for a one-state op-amp section followed by a resonance.

    The block is lower-triangular (Φ12 = Φ13 = Σ12 = Σ13 = 0) and its demand is
    k·(u − x0).  In linear mode the first state's error u − x0 only decays, so
    a sample that starts linear stays linear and needs no end check; one that
    starts slewing keeps slewing for (|u − x0| − E)/SR, the whole sample when
    that is at least SR·T; otherwise :func:`_tri_switch` finishes it.  *sg*
    holds the three Σ rows [x0, x1, x2, u, c], then SR, then SR·T.  Other
    three-state blocks take the array path.
    """
    if e_slew > 0.0:
        d = u - x0
        if abs(d) > e_slew:
            c = sg[15] if d > 0.0 else -sg[15]
            y0 = sg[3] * u + sg[4] * c + sg[0] * x0
            y1 = sg[8] * u + sg[9] * c + sg[5] * x0 + sg[6] * x1 + sg[7] * x2
            y2 = sg[13] * u + sg[14] * c + sg[10] * x0 + sg[11] * x1 + sg[12] * x2
            return y0, y1, y2, abs(d) - e_slew < sg[16]
    y0 = g1 * u + a11 * x0
    y1 = g2 * u + a21 * x0 + a22 * x1 + a23 * x2
    y2 = g3 * u + a31 * x0 + a32 * x1 + a33 * x2
    return y0, y1, y2, False


@numba.njit(cache=True, parallel=True)
def _line_filter(src, bits, coef, blank, dst, bad_rows, n_runs):
    """Filter every row of *src* into *dst*; flag rows holding NaN or ±inf.

    Rows go in groups of four; the groups are split into *n_runs* contiguous
    runs (numba prange over runs), each allocating its buffers once.  The work
    is in :func:`_filter_group`, kept out of the parallel region so that it
    compiles once as a plain function.
    """
    h, w = src.shape
    n_groups = (h + _ROWS - 1) // _ROWS
    n_runs = max(1, min(n_groups, n_runs))
    for run in numba.prange(n_runs):
        buf = np.zeros((_ROWS, w), np.float64)  # between blocks of a multi-block filter
        pad_in = np.full(w, blank, np.float32)  # stand-in rows past the last row
        pad_out = np.zeros(w, np.float32)
        st = np.zeros((_ROWS, NMAX))
        xs = np.zeros(NMAX)
        xn = np.zeros(NMAX)
        for grp in range(run * n_groups // n_runs, (run + 1) * n_groups // n_runs):
            _filter_group(src, bits, coef, blank, dst, bad_rows, grp * _ROWS, buf, pad_in,
                          pad_out, st, xs, xn)


@numba.njit(cache=True)
def _filter_group(src, bits, coef, blank, dst, bad_rows, i0, buf, pad_in, pad_out, st, xs, xn):
    """Rows i0 … i0 + 3 of *src* through every block into *dst* (eqs. 1–4).

    One block (the usual case) runs straight from the float32 rows to the
    float32 rows; several blocks pass float64 rows between them.
    """
    h, w = src.shape
    for r in range(_ROWS):
        i = i0 + r
        if i < h:
            top = np.uint32(0)
            for j in range(w):  # exponent bits all set ⇔ NaN or ±inf (IEEE 754 binary32)
                top = max(top, bits[i, j] & np.uint32(0x7F800000))
            if top == np.uint32(0x7F800000):
                bad_rows[i] = 1
    s0 = src[i0]
    s1 = src[i0 + 1] if i0 + 1 < h else pad_in
    s2 = src[i0 + 2] if i0 + 2 < h else pad_in
    s3 = src[i0 + 3] if i0 + 3 < h else pad_in
    d0 = dst[i0]
    d1 = dst[i0 + 1] if i0 + 1 < h else pad_out
    d2 = dst[i0 + 2] if i0 + 2 < h else pad_out
    d3 = dst[i0 + 3] if i0 + 3 < h else pad_out
    n_blk = coef.shape[0]
    if n_blk == 0:
        for j in range(w):
            d0[j] = s0[j]
            d1[j] = s1[j]
            d2[j] = s2[j]
            d3[j] = s3[j]
    elif n_blk == 1:
        _block(coef[0], s0, s1, s2, s3, d0, d1, d2, d3, blank, blank, st, xs, xn)
    else:
        b0 = buf[0]
        b1 = buf[1]
        b2 = buf[2]
        b3 = buf[3]
        for j in range(w):
            b0[j] = s0[j] - blank
            b1[j] = s1[j] - blank
            b2[j] = s2[j] - blank
            b3[j] = s3[j] - blank
        for blk in range(n_blk):
            _block(coef[blk], b0, b1, b2, b3, b0, b1, b2, b3, 0.0, 0.0, st, xs, xn)
        for j in range(w):
            d0[j] = b0[j] + blank
            d1[j] = b1[j] + blank
            d2[j] = b2[j] + blank
            d3[j] = b3[j] + blank


@numba.njit(cache=True)
def lin_map(cf):
    """A block's linear map [Φ | Γ] (eq. 1) as (a11, a12, a13, g1, a21, a22, a23, g2, a31,
    a32, a33, g3): a_ij = Φ[i, j], g_i = Γ[i] (zeros past the block's states)."""
    w5 = NMAX + 2
    return (cf[K_LIN], cf[K_LIN + 1], cf[K_LIN + 2], cf[K_LIN + NMAX],
            cf[K_LIN + w5], cf[K_LIN + w5 + 1], cf[K_LIN + w5 + 2], cf[K_LIN + w5 + NMAX],
            cf[K_LIN + 2 * w5], cf[K_LIN + 2 * w5 + 1], cf[K_LIN + 2 * w5 + 2],
            cf[K_LIN + 2 * w5 + NMAX])


@numba.njit(cache=True, fastmath={"contract"})
def _block(cf, i0, i1, i2, i3, o0, o1, o2, o3, b_in, b_out, st, xs, xn):
    """Four rows through one block: u = i_r − b_in, o_r = y + b_out (eqs. 1–4).

    *i_r* may be *o_r* (each sample is read before it is written).
    """
    w = i0.shape[0]
    n = int(cf[K_N])
    sr = cf[K_SLEW]
    end = cf[K_END] > 0.0
    last_only = end
    for k in range(n - 1):
        if cf[K_C + k] != 0.0:
            last_only = False
    cl = cf[K_C + n - 1]
    w5 = NMAX + 2                    # map row: [Φ_i0, Φ_i1, Φ_i2 | Γ_i | Σc_i]
    a11, a12, a13, g1, a21, a22, a23, g2, a31, a32, a33, g3 = lin_map(cf)
    sw = K_SLW + w5                  # second row of the slewing map
    sw2 = K_SLW + 2 * w5
    sg2 = (cf[K_SLW], cf[K_SLW + 1], cf[K_SLW + NMAX], cf[K_SLW + NMAX + 1],
           cf[sw], cf[sw + 1], cf[sw + NMAX], cf[sw + NMAX + 1], sr)
    sg3 = (cf[K_SLW], cf[K_SLW + 1], cf[K_SLW + 2], cf[K_SLW + NMAX], cf[K_SLW + NMAX + 1],
           cf[sw], cf[sw + 1], cf[sw + 2], cf[sw + NMAX], cf[sw + NMAX + 1],
           cf[sw2], cf[sw2 + 1], cf[sw2 + 2], cf[sw2 + NMAX], cf[sw2 + NMAX + 1], sr,
           cf[K_STEP])
    di = int(cf[K_DI])
    tri = (a12 == 0.0 and a13 == 0.0 and sg3[1] == 0.0 and sg3[2] == 0.0
           and (sr <= 0.0 or di == 0))
    e_sl = cf[K_E] if sr > 0.0 else 0.0
    p0 = p1 = p2 = p3 = 0.0
    q0 = q1 = q2 = q3 = 0.0
    r0 = r1 = r2 = r3 = 0.0
    t0p = t0q = t0r = t1p = t1q = t1r = t2p = t2q = t2r = t3p = t3q = t3r = 0.0
    h0 = h1 = h2 = h3 = False
    if n == 1 and sr > 0.0:
        e_slew = cf[K_E]
        step = cf[K_STEP]
        for j in range(w):  # eq. (4); output = state at the end of the pixel
            p0 = _one_state_slew(p0, i0[j] - b_in, a11, e_slew, step)
            p1 = _one_state_slew(p1, i1[j] - b_in, a11, e_slew, step)
            p2 = _one_state_slew(p2, i2[j] - b_in, a11, e_slew, step)
            p3 = _one_state_slew(p3, i3[j] - b_in, a11, e_slew, step)
            o0[j] = b_out + cl * p0
            o1[j] = b_out + cl * p1
            o2[j] = b_out + cl * p2
            o3[j] = b_out + cl * p3
    elif n == 1 and last_only:
        for j in range(w):  # eq. (1), y = C·x[n+1]
            p0 = g1 * (i0[j] - b_in) + a11 * p0
            p1 = g1 * (i1[j] - b_in) + a11 * p1
            p2 = g1 * (i2[j] - b_in) + a11 * p2
            p3 = g1 * (i3[j] - b_in) + a11 * p3
            o0[j] = b_out + cl * p0
            o1[j] = b_out + cl * p1
            o2[j] = b_out + cl * p2
            o3[j] = b_out + cl * p3
    elif last_only and n == 2 and sr <= 0.0:
        for j in range(w):  # eq. (1), y = C·x[n+1]; input term first: off the recursion's path
            u0 = i0[j] - b_in
            u1 = i1[j] - b_in
            u2 = i2[j] - b_in
            u3 = i3[j] - b_in
            p0, q0 = g1 * u0 + a11 * p0 + a12 * q0, g2 * u0 + a21 * p0 + a22 * q0
            p1, q1 = g1 * u1 + a11 * p1 + a12 * q1, g2 * u1 + a21 * p1 + a22 * q1
            p2, q2 = g1 * u2 + a11 * p2 + a12 * q2, g2 * u2 + a21 * p2 + a22 * q2
            p3, q3 = g1 * u3 + a11 * p3 + a12 * q3, g2 * u3 + a21 * p3 + a22 * q3
            o0[j] = b_out + cl * q0
            o1[j] = b_out + cl * q1
            o2[j] = b_out + cl * q2
            o3[j] = b_out + cl * q3
    elif last_only and n == 3 and tri and sr <= 0.0:
        for j in range(w):  # eq. (1) for a one-state section followed by a resonance
            u0 = i0[j] - b_in
            u1 = i1[j] - b_in
            u2 = i2[j] - b_in
            u3 = i3[j] - b_in
            p0, q0, r0 = (g1 * u0 + a11 * p0, g2 * u0 + a21 * p0 + a22 * q0 + a23 * r0,
                          g3 * u0 + a31 * p0 + a32 * q0 + a33 * r0)
            p1, q1, r1 = (g1 * u1 + a11 * p1, g2 * u1 + a21 * p1 + a22 * q1 + a23 * r1,
                          g3 * u1 + a31 * p1 + a32 * q1 + a33 * r1)
            p2, q2, r2 = (g1 * u2 + a11 * p2, g2 * u2 + a21 * p2 + a22 * q2 + a23 * r2,
                          g3 * u2 + a31 * p2 + a32 * q2 + a33 * r2)
            p3, q3, r3 = (g1 * u3 + a11 * p3, g2 * u3 + a21 * p3 + a22 * q3 + a23 * r3,
                          g3 * u3 + a31 * p3 + a32 * q3 + a33 * r3)
            o0[j] = b_out + cl * r0
            o1[j] = b_out + cl * r1
            o2[j] = b_out + cl * r2
            o3[j] = b_out + cl * r3
    elif last_only and n == 2:
        # eq. (1), y = C·x[n+1] (C picks the last state).  The inner loop runs while no
        # row touches its rate limit and holds no call, so its states stay in
        # registers; a sample where a row does is finished outside it.
        j = 0
        while j < w:
            while j < w:
                u0 = i0[j] - b_in
                u1 = i1[j] - b_in
                u2 = i2[j] - b_in
                u3 = i3[j] - b_in
                t0p, t0q, h0 = _lin2(a11, a12, a21, a22, g1, g2, sg2, di, e_sl, p0, q0, u0)
                t1p, t1q, h1 = _lin2(a11, a12, a21, a22, g1, g2, sg2, di, e_sl, p1, q1, u1)
                t2p, t2q, h2 = _lin2(a11, a12, a21, a22, g1, g2, sg2, di, e_sl, p2, q2, u2)
                t3p, t3q, h3 = _lin2(a11, a12, a21, a22, g1, g2, sg2, di, e_sl, p3, q3, u3)
                if h0 | h1 | h2 | h3:
                    break
                p0, q0 = t0p, t0q
                o0[j] = b_out + cl * q0
                p1, q1 = t1p, t1q
                o1[j] = b_out + cl * q1
                p2, q2 = t2p, t2q
                o2[j] = b_out + cl * q2
                p3, q3 = t3p, t3q
                o3[j] = b_out + cl * q3
                j += 1
            if j < w:  # u0 … u3 still hold sample j
                if h0:
                    t0p, t0q, _ = _slow_sample(cf, p0, q0, 0.0, u0, xs, xn)
                p0, q0 = t0p, t0q
                o0[j] = b_out + cl * q0
                if h1:
                    t1p, t1q, _ = _slow_sample(cf, p1, q1, 0.0, u1, xs, xn)
                p1, q1 = t1p, t1q
                o1[j] = b_out + cl * q1
                if h2:
                    t2p, t2q, _ = _slow_sample(cf, p2, q2, 0.0, u2, xs, xn)
                p2, q2 = t2p, t2q
                o2[j] = b_out + cl * q2
                if h3:
                    t3p, t3q, _ = _slow_sample(cf, p3, q3, 0.0, u3, xs, xn)
                p3, q3 = t3p, t3q
                o3[j] = b_out + cl * q3
                j += 1
    elif last_only and n == 3 and tri:
        # eq. (1), y = C·x[n+1] (C picks the last state).  The inner loop runs while no
        # row touches its rate limit and holds no call, so its states stay in
        # registers; a sample where a row does is finished outside it.
        j = 0
        while j < w:
            while j < w:
                u0 = i0[j] - b_in
                u1 = i1[j] - b_in
                u2 = i2[j] - b_in
                u3 = i3[j] - b_in
                t0p, t0q, t0r, h0 = _lin3t(
                    a11, a21, a22, a23, a31, a32, a33, g1, g2, g3, sg3, e_sl,
                    p0, q0, r0, u0)
                t1p, t1q, t1r, h1 = _lin3t(
                    a11, a21, a22, a23, a31, a32, a33, g1, g2, g3, sg3, e_sl,
                    p1, q1, r1, u1)
                t2p, t2q, t2r, h2 = _lin3t(
                    a11, a21, a22, a23, a31, a32, a33, g1, g2, g3, sg3, e_sl,
                    p2, q2, r2, u2)
                t3p, t3q, t3r, h3 = _lin3t(
                    a11, a21, a22, a23, a31, a32, a33, g1, g2, g3, sg3, e_sl,
                    p3, q3, r3, u3)
                if h0 | h1 | h2 | h3:
                    break
                p0, q0, r0 = t0p, t0q, t0r
                o0[j] = b_out + cl * r0
                p1, q1, r1 = t1p, t1q, t1r
                o1[j] = b_out + cl * r1
                p2, q2, r2 = t2p, t2q, t2r
                o2[j] = b_out + cl * r2
                p3, q3, r3 = t3p, t3q, t3r
                o3[j] = b_out + cl * r3
                j += 1
            if j < w:  # u0 … u3 still hold sample j
                if h0:
                    t0p, t0q, t0r = _tri_switch(cf, p0, q0, r0, u0, xs, xn)
                p0, q0, r0 = t0p, t0q, t0r
                o0[j] = b_out + cl * r0
                if h1:
                    t1p, t1q, t1r = _tri_switch(cf, p1, q1, r1, u1, xs, xn)
                p1, q1, r1 = t1p, t1q, t1r
                o1[j] = b_out + cl * r1
                if h2:
                    t2p, t2q, t2r = _tri_switch(cf, p2, q2, r2, u2, xs, xn)
                p2, q2, r2 = t2p, t2q, t2r
                o2[j] = b_out + cl * r2
                if h3:
                    t3p, t3q, t3r = _tri_switch(cf, p3, q3, r3, u3, xs, xn)
                p3, q3, r3 = t3p, t3q, t3r
                o3[j] = b_out + cl * r3
                j += 1
    else:
        # any other block (bilinear, general output row): array path, eqs. (1)–(3)
        dd = cf[K_C + NMAX]
        for r in range(_ROWS):
            for k in range(NMAX):
                st[r, k] = 0.0
        for j in range(w):
            for r in range(_ROWS):
                if r == 0:
                    u = i0[j] - b_in
                elif r == 1:
                    u = i1[j] - b_in
                elif r == 2:
                    u = i2[j] - b_in
                else:
                    u = i3[j] - b_in
                x = st[r]
                y = dd * u
                if not end:
                    for k in range(n):
                        y += cf[K_C + k] * x[k]
                _generic_sample(cf, x, xn, u)
                if end:
                    y = 0.0
                    for k in range(n):
                        y += cf[K_C + k] * x[k]
                if r == 0:
                    o0[j] = b_out + y
                elif r == 1:
                    o1[j] = b_out + y
                elif r == 2:
                    o2[j] = b_out + y
                else:
                    o3[j] = b_out + y
