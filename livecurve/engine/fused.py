"""One pass per line: Y′CbCr planes through a whole chain and its output converter.

Input planes are 8-bit (uint8) or 10-/12-bit (uint16, codes as stored); the output is
8-bit Y′CbCr, legal range, as the encoder takes it.

The reference path turns a decoded picture into R′G′B′ codes, then into planar volts
(:func:`livecurve.signal.levels.codes_to_volts`), runs each channel's tables and line
filters over whole planes (:class:`livecurve.engine.pipeline.FrameEngine`), and turns
the volts back into codes (:func:`~livecurve.signal.levels.volts_to_codes`).  Every step
streams full frames through memory.  This module does the same arithmetic in one numba
kernel that walks a band of sixteen scan lines at a time while they sit in cache, parallel
over bands of lines, and stays in the clip's own Y′CbCr domain:

codes → volts
    Y′ = (code − y_lo)/y_span, Pb/Pr = (code − c_mid)/c_span (ITU-R BT.601/BT.709 code
    levels, :mod:`livecurve.signal.codes`), scaled to 700 mV and centred; an ``rgb``
    chain takes one matrix (Y′PbPr → R′G′B′ of the standard) here.
each run's table, then its line filter
    The same (bi)linear lookup as :mod:`livecurve.engine.tables` (float32): first every
    sample's index and fraction (a loop that vectorises), then one 8-byte read of the
    entry and its step to the next (a 2-D table first blends its two columns once per
    line, at the line's control).  The line filter runs with the band's sixteen lines as
    vector lanes (a line's recursion is serial along it, but the lines are independent),
    sixty-four samples at a time so the lanes stay in cache; its arithmetic is the line
    filters' own (:mod:`livecurve.engine.linefilters`, eqs. 1 and 4), so a line comes out
    as the reference path's does, bit for bit (tested).  Blocks the lanes do not cover
    (several blocks, a general output row, a multi-state rate limit) run through the line
    filters' own kernel.
output converter
    As :func:`~livecurve.signal.levels.volts_to_codes`: clip to the converter's permitted
    codes, round half up, back to normalised values; an ``rgb`` chain clips to the
    R′G′B′ cube and takes one matrix back to Y′PbPr.  The result is quantised to the
    output word (8-bit Y′CbCr, legal range).  A ``ypbpr`` chain's output stays Y′CbCr:
    no R′G′B′ round trip, so colours outside the R′G′B′ cube are not clipped to it
    (the reference path clips them when it makes R′G′B′ codes).

Chroma siting for 4:2:0 and 4:2:2 (common practice, the MPEG-2 / H.264 default
"left" location): chroma samples sit on the even luma columns and, for 4:2:0, half-way
between two luma lines.  Upsampling is linear between neighbouring chroma samples
(weights ½·½ across, ¾·¼ down), and the output is brought back with the matching
[¼ ½ ¼] filter across and the mean of the two lines down; edges repeat the last sample.
A ``ypbpr`` chain whose chroma channel has no stages never resamples it: a plane without
stages goes through the converter as a table of codes (one entry per input code).

*line_step* runs every n-th line only, for a view that reads no others (the preview at
1080p); each line is computed as in a full pass.

What the kernel does not do (the caller keeps the reference path for these): the solver
per pixel (``--exact``), controls varying per pixel, sources deeper than 8 bits.
"""

from __future__ import annotations

import numba as nb
import numpy as np

from livecurve.engine.linefilters import (
    K_C,
    K_E,
    K_END,
    K_LIN,
    K_N,
    K_SLEW,
    K_SLW,
    K_STEP,
    N_COEF,
    NMAX,
    _filter_group,
    _one_state_slew,
    lin_map,
)
from livecurve.errors import MediaError, SolverError
from livecurve.signal.codes import code_range
from livecurve.signal.component import (
    Y_SPAN_V,
    centre_offsets_v,
    rgb_to_ypbpr_matrix,
    ypbpr_to_rgb_matrix,
)
from livecurve.signal.levels import TIE_EPS, _converter_ranges

#: Lines handled together.  The line filters run across the band's lines as vector lanes
#: (a line's recursion is serial along the line, but the band's lines are independent), so
#: the band is a multiple of the SIMD width.  Measured here with a throwaway script on a
#: 3-state filter over three 1080p planes: 16 lanes 3.4 ms, 8 lanes 12.4 ms (LLVM unrolls
#: the short lane loop instead of vectorising it); the filter's share of the kernel is in
#: benchmarks/README.md, "Real time at HD".
BAND = 16
#: Samples of a line taken at a time through the lanes (they stay in the first-level cache).
_XB = 64
#: Fast-math flags for the conversions: contraction and reassociation, but NaN and inf kept
#: (the converter counts NaN pixels).
_FM = {"contract", "reassoc", "nsz", "arcp"}
#: Lines of the line filters' own row group (:mod:`livecurve.engine.linefilters`).
_LF_ROWS = 4

# run descriptor columns (float64 array, one row per run)
_R_TAB, _R_N, _R_M, _R_LO, _R_INV, _R_CPOS, _R_LF, _R_NLF, _R_BLANK = range(9)
_R_COLS = 9


def fusable(engine, controls: dict | None = None) -> bool:
    """True when :class:`FusedChain` can run *engine* with these control values (tables,
    not the solver, and no control varying per pixel)."""
    if engine.exact:
        return False
    for v in (controls or {}).values():
        if np.ndim(v) > 1:
            return False
    return True


class FusedChain:
    """A :class:`~livecurve.engine.pipeline.FrameEngine` compiled for Y′CbCr planes.

    Parameters
    ----------
    engine : FrameEngine
        Built on tables (not ``exact``).  Its tables are re-read whenever a run's table
        object changes (a knob turned, a rebuild), so the engine may be swapped or rebuilt
        between frames; assign :attr:`engine` to swap it.
    space : {"ypbpr", "rgb"}
        The chain's signal space.
    standard : {"bt601", "bt709", "bt2020"}
        Matrix between Y′CbCr and R′G′B′.
    converter_bits, converter_legal
        The chain's output converter.
    in_legal : bool
        The source's code range (limited ``tv`` or full ``pc``); the output is always
        legal range, as the encoder writes it.
    in_bits : {8, 10, 12}
        The source's bits per code: uint8 planes for 8, uint16 planes (codes as stored,
        0…2^bits − 1) for 10 and 12.  The output is always 8-bit.
    """

    def __init__(self, engine, *, space: str, standard: str, converter_bits: int = 10,
                 converter_legal: bool = True, in_legal: bool = True, in_bits: int = 8):
        if in_bits not in (8, 10, 12):
            raise ValueError(f"in_bits must be 8, 10 or 12, not {in_bits!r}")
        self.engine = engine
        self.in_legal = bool(in_legal)
        self.in_bits = int(in_bits)
        self.space = space
        self.standard = standard
        cin = code_range(self.in_bits, legal=bool(in_legal))
        self._in = np.array([cin.y_lo, cin.y_span, cin.c_mid, cin.c_span], dtype=np.float64)
        cout = code_range(8, legal=True)
        self._out = np.array([cout.y_lo, cout.y_span, cout.c_mid, cout.c_span,
                              cout.valid_lo, cout.valid_hi], dtype=np.float64)
        conv = code_range(converter_bits, legal=bool(converter_legal))
        gain, bias, lo, hi, igain, ibias = _converter_ranges(space, conv)
        self._conv = np.stack([gain, bias, lo, hi, igain, ibias]).astype(np.float64)
        self._m_in = ypbpr_to_rgb_matrix(standard)   # normalised Y′PbPr → R′G′B′
        self._m_out = rgb_to_ypbpr_matrix(standard)
        self._off = np.array(centre_offsets_v(space), dtype=np.float64)
        self._key = None
        self._shape_key = None
        self._luts = None

    # ---- packing -------------------------------------------------------------------------
    def _pack(self) -> None:
        """Gather every run's table and filter into flat arrays (when they changed)."""
        eng = self.engine
        # the objects themselves, compared by identity (an id() can be reused once the
        # old table is freed)
        key = [(r.table, r.line_filter, r.blank_out_v) for rs in eng.runs for r in rs]
        if self._key is not None and len(key) == len(self._key) and all(
                a[0] is b[0] and a[1] is b[1] and a[2] == b[2]
                for a, b in zip(key, self._key, strict=True)) \
                and [len(rs) for rs in eng.runs] == self._shape_key:
            return
        self._shape_key = [len(rs) for rs in eng.runs]
        tabs, coefs, rows = [], [], []
        chan_runs = np.full((3, max(1, max(len(rs) for rs in eng.runs))), -1, np.int64)
        n_tab = n_lf = n_2d = 0
        for ch in range(3):
            for k, run in enumerate(eng.runs[ch]):
                t = run.table
                vals = t.by_control() if t.is_2d else t.values
                lf = run.line_filter
                nlf = 0 if lf is None else lf.n_blocks
                rows.append([n_tab, t.n, vals.shape[0] if t.is_2d else 1, t.lo_v,
                             (t.n - 1) / (t.hi_v - t.lo_v), n_2d if t.is_2d else -1,
                             n_lf, nlf, float(np.float32(run.blank_out_v))])
                chan_runs[ch, k] = len(rows) - 1
                tabs.append(np.ascontiguousarray(vals, np.float32).ravel())
                n_tab += vals.size
                if nlf:
                    coefs.append(lf.coef)
                    n_lf += nlf
                if t.is_2d:
                    n_2d += 1
        self._tab = np.concatenate(tabs) if tabs else np.zeros(1, np.float32)
        self._pair = _pairs(self._tab, rows)
        self._n_max = int(max((r[_R_N] for r in rows), default=2))
        # NaN/inf can reach a line filter only from a table holding them
        self._check = not bool(np.isfinite(self._tab).all())
        self._coef = np.concatenate(coefs) if coefs else np.zeros((1, N_COEF))
        self._runs = np.array(rows, np.float64).reshape(-1, _R_COLS)
        if self._runs.shape[0] == 0:
            self._runs = np.zeros((1, _R_COLS))
        self._chan_runs = chan_runs
        self._n_2d = n_2d
        self._active = np.array([len(eng.runs[ch]) > 0 for ch in range(3)])
        if self.space == "rgb":
            self._active[:] = True
        self._luts = self._code_luts()
        self._key = key

    def _code_luts(self) -> np.ndarray:
        """Per channel, output code for each input code of a plane without stages (ypbpr)."""
        codes = np.arange(1 << self.in_bits, dtype=np.float64)
        y_lo, y_span, c_mid, c_span = self._in
        luts = np.zeros((3, codes.size), np.uint8)
        gain, bias, lo, hi, igain, ibias = self._conv
        oy_lo, oy_span, oc_mid, oc_span, vlo, vhi = self._out
        for ch in range(3):
            if ch == 0:
                v = (codes - y_lo) / y_span * Y_SPAN_V - self._off[0]
            else:
                v = (codes - c_mid) / c_span * Y_SPAN_V - self._off[ch]
            v = v.astype(np.float32).astype(np.float64)  # as the float32 planes hold them
            c = np.clip(gain[ch] * v + bias[ch], lo[ch], hi[ch])
            n = np.floor(c + 0.5 + TIE_EPS) * igain[ch] + ibias[ch]
            o = oy_lo + n * oy_span if ch == 0 else oc_mid + n * oc_span
            luts[ch] = np.floor(np.clip(o, vlo, vhi) + 0.5 + TIE_EPS).astype(np.uint8)
        return luts

    def _cpos(self, controls: dict, h: int) -> np.ndarray:
        """Fractional control column of each 2-D run for each line, shape (n_2d, h)."""
        out = np.zeros((max(self._n_2d, 1), h), np.float32)
        eng = self.engine
        idx = {id(run): k for rs in eng.runs for k, run in enumerate(rs)}
        for rs in eng.runs:
            for run in rs:
                t = run.table
                if not t.is_2d:
                    continue
                k = int(self._runs[self._chan_runs[run.channel, idx[id(run)]]][_R_CPOS])
                c = controls.get(run.knob, eng.state.live.get(run.knob))
                if c is None:
                    c = 0.5 * (t.c_lo + t.c_hi)
                c = np.asarray(c, dtype=np.float64)
                if c.ndim == 0:
                    c = np.full(h, float(c))
                if c.shape != (h,):
                    raise ValueError("control per row must have one value per row")
                out[k] = t.control_pos(c)
        return out

    # ---- per frame -----------------------------------------------------------------------
    def process(self, y: np.ndarray, cb: np.ndarray, cr: np.ndarray, *,
                controls: dict | None = None, out=None, line_step: int = 1):
        """Run one frame of Y′CbCr planes through the chain and the converter.

        Parameters
        ----------
        y : ndarray (H, W) uint8 (uint16 for a 10- or 12-bit source)
        cb, cr : ndarray of y's type, shape (H, W), (H, ⌈W/2⌉) or (⌈H/2⌉, ⌈W/2⌉)
            4:4:4, 4:2:2 or 4:2:0 chroma.
        controls : dict, optional
            Modulated knob → a scalar or one value per line (as
            :meth:`FrameEngine.process` takes them; per-pixel controls are not fused).
        out : tuple of three ndarrays, optional
            Output planes of the input planes' shapes (may not be the inputs).
        line_step : int
            Run only every *line_step*-th line (0, step, 2·step, …), for a view that reads
            no others.  Each line goes through the chain on its own (line filters run
            along a line), so those lines come out as in a full pass; the other lines of
            *out* are left as they were.  A chroma line of the output is made from the one
            run line it holds (the full pass averages its two lines for 4:2:0).

        Returns
        -------
        tuple (y, cb, cr) of uint8 planes, legal range.
        """
        if isinstance(line_step, bool) or int(line_step) != line_step or line_step < 1:
            raise ValueError(f"line_step must be a whole number >= 1, not {line_step!r}")
        lstep = int(line_step)
        h, w = y.shape
        sh, sv = _subsampling(y.shape, cb.shape)
        if cr.shape != cb.shape:
            raise MediaError(f"Cb plane {cb.shape} and Cr plane {cr.shape} differ")
        want = np.uint8 if self.in_bits == 8 else np.uint16
        for a in (y, cb, cr):
            if a.dtype != want:
                raise MediaError(f"{self.in_bits}-bit planes must be {np.dtype(want).name}, "
                                 f"not {a.dtype}")
        if out is None:
            out = tuple(np.empty(a.shape, np.uint8) for a in (y, cb, cr))
        self._pack()
        cpos = self._cpos(controls or {}, h)
        oy, ocb, ocr = out
        act = self._active
        rgb = self.space == "rgb"
        if not act[0]:
            np.take(self._luts[0], y[::lstep], out=oy[::lstep])
        if not rgb and not act[1]:
            np.take(self._luts[1], cb, out=ocb)
        if not rgb and not act[2]:
            np.take(self._luts[2], cr, out=ocr)
        if act.any():
            stats = np.zeros(2, np.int64)
            n_chunks = max(1, 4 * nb.get_num_threads())
            _fused(y, cb, cr, sh, sv, self._in, self._m_in, self._m_out, self._off, rgb,
                   act.astype(np.uint8), self._chan_runs, self._runs, self._tab, self._pair,
                   self._n_max, self._check, cpos, self._coef, self._conv, self._out, oy, ocb,
                   ocr, stats, n_chunks, lstep)
            if stats[1]:
                raise MediaError("a line filter met NaN or infinite volts; line filters need "
                                 "finite volts")
            if stats[0]:
                raise SolverError(f"the chain produced NaN in {int(stats[0])} pixels: values "
                                  "no converter can encode")
        return out


    def passthrough(self, y: np.ndarray, cb: np.ndarray, cr: np.ndarray, *, out=None):
        """The source's planes as they are (the chain bypassed), as 8-bit legal-range
        codes: a copy for 8-bit legal sources, else each code re-coded to the 8-bit code
        of the same level (rounded half up)."""
        if out is None:
            out = tuple(np.empty(a.shape, np.uint8) for a in (y, cb, cr))
        if self.in_bits == 8 and self.in_legal:
            for a, b in zip((y, cb, cr), out, strict=True):
                np.copyto(b, a)
            return out
        luts = getattr(self, "_recode", None)
        if luts is None:
            codes = np.arange(1 << self.in_bits, dtype=np.float64)
            y_lo, y_span, c_mid, c_span = self._in
            oy_lo, oy_span, oc_mid, oc_span, vlo, vhi = self._out
            ly = oy_lo + (codes - y_lo) / y_span * oy_span
            lc = oc_mid + (codes - c_mid) / c_span * oc_span
            luts = self._recode = tuple(
                np.floor(np.clip(v, vlo, vhi) + 0.5 + TIE_EPS).astype(np.uint8)
                for v in (ly, lc))
        np.take(luts[0], y, out=out[0])
        np.take(luts[1], cb, out=out[1])
        np.take(luts[1], cr, out=out[2])
        return out


def _pairs(tab: np.ndarray, rows) -> np.ndarray:
    """Each 1-D table entry with the step to the next, (t[i], t[i+1] − t[i]) as one
    complex64, so the lookup reads one 8-byte word per sample.  The step is the same
    float32 difference the interpolation takes, so results are unchanged.  Entries of
    2-D tables are left zero (their lines blend a column of their own)."""
    pair = np.zeros(tab.size, np.complex64)
    for r in rows:
        off, n, m = int(r[_R_TAB]), int(r[_R_N]), int(r[_R_M])
        if m != 1:
            continue
        t = tab[off:off + n]
        pair.real[off:off + n] = t
        pair.imag[off:off + n - 1] = t[1:] - t[:-1]
    return pair


def _subsampling(luma: tuple, chroma: tuple) -> tuple[int, int]:
    """(horizontal, vertical) chroma shift: 0 for full resolution, 1 for half."""
    h, w = luma
    for sh in (0, 1):
        for sv in (0, 1):
            if chroma == ((h + sv) >> sv, (w + sh) >> sh):
                return sh, sv
    raise MediaError(f"chroma planes {chroma} do not fit a {w}x{h} picture as 4:4:4, 4:2:2 "
                     "or 4:2:0")


@nb.njit(cache=True, fastmath=_FM)
def _chroma_line(c, i, sh, sv, tmp, out):
    """Chroma plane *c* at luma line *i*, full width, into *out* (float64, W): linear
    between the sited samples (¾·¼ down for 4:2:0, ½·½ across for 4:2:0 and 4:2:2)."""
    ch, cw = c.shape
    w = out.shape[0]
    if sv:
        k = i >> 1
        k2 = max(k - 1, 0) if (i & 1) == 0 else min(k + 1, ch - 1)
        ca = c[k]
        cb_ = c[k2]
        for j in range(cw):
            tmp[j] = 0.75 * np.float64(ca[j]) + 0.25 * np.float64(cb_[j])
    else:
        ca = c[i]
        for j in range(cw):
            tmp[j] = np.float64(ca[j])
    if sh:
        for j in range(cw - 1):      # sited sample, then half-way to the next (vectorises)
            a = tmp[j]
            out[2 * j] = a
            out[2 * j + 1] = 0.5 * (a + tmp[j + 1])
        j = cw - 1                   # the edge repeats the last sample
        out[2 * j] = tmp[j]
        if 2 * j + 1 < w:
            out[2 * j + 1] = 0.5 * (tmp[j] + tmp[j])
    else:
        for x in range(w):
            out[x] = tmp[x]


@nb.njit(cache=True, parallel=True, nogil=True)
def _fused(y, cb, cr, sh, sv, cin, m_in, m_out, off, rgb, act, chan_runs, runs, tab, pair,
           n_max, check, cpos, coef, conv, cout, oy, ocb, ocr, stats, n_chunks, lstep):
    h = (y.shape[0] + lstep - 1) // lstep      # lines run (every lstep-th)
    w = y.shape[1]
    n_groups = (h + BAND - 1) // BAND
    n_chunks = max(1, min(n_groups, n_chunks))
    nan_total = 0
    bad_total = 0
    for chunk in nb.prange(n_chunks):
        v = np.zeros((3, BAND, w), np.float32)
        nv = np.zeros((2, BAND, w), np.float32)   # normalised Pb, Pr out, full resolution
        sc = _Scratch(w, n_max)
        nan_c = 0
        bad_c = 0
        for grp in range(chunk * n_groups // n_chunks, (chunk + 1) * n_groups // n_chunks):
            i0 = grp * BAND
            nr = min(BAND, h - i0)
            _to_volts(y, cb, cr, sh, sv, cin, m_in, off, rgb, act, i0, nr, v, lstep)
            bad_c += _runs_band(v, act, chan_runs, runs, tab, pair, cpos, coef, i0, nr, sc,
                                check, lstep)
            nan_c += _convert(y, v, nv, i0, nr, sh, sv, rgb, act, conv, m_out, cout,
                              oy, ocb, ocr, lstep)
        nan_total += nan_c
        bad_total += bad_c
    stats[0] = nan_total
    stats[1] = bad_total


@nb.njit(cache=True, fastmath=_FM)
def _to_volts(y, cb, cr, sh, sv, cin, m_in, off, rgb, act, i0, nr, v, lstep):
    """Run lines i0 … i0+nr−1 (picture lines i·lstep) of codes into centred volts,
    v (3, BAND, W)."""
    w = y.shape[1]
    y_lo, y_span, c_mid, c_span = cin[0], cin[1], cin[2], cin[3]
    ys = Y_SPAN_V
    ky = ys / y_span
    kc = ys / c_span
    o0, o1, o2 = off[0], off[1], off[2]
    a00, a01, a02 = m_in[0, 0] * ys, m_in[0, 1] * ys, m_in[0, 2] * ys
    a10, a11, a12 = m_in[1, 0] * ys, m_in[1, 1] * ys, m_in[1, 2] * ys
    a20, a21, a22 = m_in[2, 0] * ys, m_in[2, 1] * ys, m_in[2, 2] * ys
    iy = 1.0 / y_span
    ic = 1.0 / c_span
    tmp = np.empty(w)
    ub = np.empty(w)
    ur = np.empty(w)
    for r in range(nr):
        i = (i0 + r) * lstep
        yr = y[i]
        v0 = v[0, r]
        v1 = v[1, r]
        v2 = v[2, r]
        if rgb:
            _chroma_line(cb, i, sh, sv, tmp, ub)
            _chroma_line(cr, i, sh, sv, tmp, ur)
            for x in range(w):
                yn = (np.float64(yr[x]) - y_lo) * iy
                pb = (ub[x] - c_mid) * ic
                pr = (ur[x] - c_mid) * ic
                v0[x] = np.float32(a00 * yn + a01 * pb + a02 * pr - o0)
                v1[x] = np.float32(a10 * yn + a11 * pb + a12 * pr - o1)
                v2[x] = np.float32(a20 * yn + a21 * pb + a22 * pr - o2)
        else:
            if act[0]:
                for x in range(w):
                    v0[x] = np.float32((np.float64(yr[x]) - y_lo) * ky - o0)
            if act[1]:
                _chroma_line(cb, i, sh, sv, tmp, ub)
                for x in range(w):
                    v1[x] = np.float32((ub[x] - c_mid) * kc - o1)
            if act[2]:
                _chroma_line(cr, i, sh, sv, tmp, ur)
                for x in range(w):
                    v2[x] = np.float32((ur[x] - c_mid) * kc - o2)


@nb.njit(cache=True)
def _Scratch(w, n_max):
    """A band's working arrays (one set per thread), as a tuple."""
    return (np.zeros((BAND, w), np.int32),        # table index of each sample
            np.zeros((BAND, w), np.float32),      # its fraction
            np.zeros((_XB, BAND), np.float32),    # samples lane-major: a line a lane
            np.zeros((BAND, max(n_max, 2)), np.complex64),   # a 2-D table's line blends
            np.zeros((BAND, w), np.float64),      # line filters' own scratch ...
            np.zeros(w, np.float32),
            np.zeros(w, np.float32),
            np.zeros((_LF_ROWS, NMAX)),
            np.zeros(NMAX),
            np.zeros(NMAX),
            np.zeros(BAND, np.uint8),             # lines met with NaN or ±inf
            np.zeros((4, BAND)))                  # lane states and the rate limit's check


@nb.njit(cache=True)
def _runs_band(v, act, chan_runs, runs, tab, pair, cpos, coef, i0, nr, sc, check, lstep):
    """Every run of every active channel over one band; returns lines with NaN/inf.

    *check*: look for NaN/inf at the line filters' inputs.  They can only come from a
    table holding them (codes and finite tables give finite volts), so the caller asks
    for the check only then."""
    idx, frac, lanes, blend, lfbuf, pad_in, pad_out, st, xs, xn, bad, lane_st = sc
    w = v.shape[2]
    bad_lines = 0
    for ch in range(3):
        if not act[ch]:
            continue
        vc = v[ch]
        for r in range(nr, BAND):   # stand-in lines past the picture: copies of the last
            for x in range(w):
                vc[r, x] = vc[nr - 1, x]
        for k in range(chan_runs.shape[1]):
            ri = chan_runs[ch, k]
            if ri < 0:
                break
            rd = runs[ri]
            n = int(rd[_R_N])
            m = int(rd[_R_M])
            t_off = int(rd[_R_TAB])
            _table_index(vc, n, np.float32(rd[_R_LO]), np.float32(rd[_R_INV]), idx, frac)
            if m != 1:
                kc = int(rd[_R_CPOS])
                _blend_columns(tab, t_off, n, m, cpos, kc, i0, lstep, blend)
            nlf = int(rd[_R_NLF])
            lf0 = int(rd[_R_LF])
            form = _lane_form(coef[lf0]) if nlf == 1 else 0
            for r in range(BAND):
                bad[r] = 0
            if form > 0:
                # a block of columns at a time, in cache: table → lanes (one line a lane),
                # the filter across the lanes (its states carried on), back to the lines
                for x0 in range(0, w, _XB):
                    x1 = min(x0 + _XB, w)
                    _table_lookup(pair, t_off, m, blend, idx, frac, x0, x1, lanes, True, vc)
                    if check:
                        _lane_check(lanes, x1 - x0, bad)
                    _lane_filter(coef[lf0], form, rd[_R_BLANK], lanes, x1 - x0, lane_st,
                                 x0 == 0)
                    _from_lanes(lanes, x0, x1, vc)
            else:
                _table_lookup(pair, t_off, m, blend, idx, frac, 0, w, lanes, False, vc)
                if nlf > 0:
                    for g in range(0, BAND, _LF_ROWS):
                        _filter_group(vc, vc.view(np.uint32), coef[lf0:lf0 + nlf],
                                      rd[_R_BLANK], vc, bad, g, lfbuf, pad_in, pad_out, st,
                                      xs, xn)
            if nlf > 0:
                for r in range(nr):
                    bad_lines += bad[r]
    return bad_lines


@nb.njit(cache=True, fastmath=True)
def _table_index(vc, n, lo, inv, idx, frac):
    """Table position of every sample of the band: the index of the entry below and the
    fraction to the next (the lookup of :mod:`livecurve.engine.tables`; vectorises)."""
    top = n - 1
    last = np.float32(top)
    topm1 = np.int32(top - 1)
    for r in range(BAND):
        row = vc[r]
        ir = idx[r]
        fr = frac[r]
        for x in range(row.shape[0]):
            p = (row[x] - lo) * inv
            p = min(max(p, np.float32(0.0)), last)
            i = min(np.int32(p), topm1)
            ir[x] = i
            fr[x] = p - np.float32(i)


@nb.njit(cache=True, fastmath=True)
def _blend_columns(tab, t_off, n, m, cpos, kc, i0, lstep, blend):
    """A 2-D table's column for each line of the band, at the line's control position,
    as (value, step to the next) pairs: the same blend the 2-D lookup makes per sample."""
    for r in range(BAND):
        c = cpos[kc, min((i0 + r) * lstep, cpos.shape[1] - 1)]
        j = min(int(c), m - 2)
        g = c - np.float32(j)
        b0 = t_off + j * n
        b1 = b0 + n
        br = blend[r]
        for i in range(n):
            br[i] = tab[b0 + i] + g * (tab[b1 + i] - tab[b0 + i])
        for i in range(n - 1):
            br[i] = br[i].real + 1j * (br[i + 1].real - br[i].real)


@nb.njit(cache=True, fastmath=True)
def _table_lookup(pair, t_off, m, blend, idx, frac, x0, x1, lanes, to_lanes, vc):
    """Interpolate samples x0 … x1−1 of each line from their pairs: into *lanes*
    (sample-major from x0, a line a lane) when *to_lanes*, else back into the lines *vc*."""
    if to_lanes:
        # a sample at a time across the lines: the lanes are written in order
        if m == 1:
            pr = pair[t_off:]
            for x in range(x0, x1):
                ln = lanes[x - x0]
                for r in range(BAND):
                    z = pr[idx[r, x]]
                    ln[r] = z.real + frac[r, x] * z.imag
        else:
            for x in range(x0, x1):
                ln = lanes[x - x0]
                for r in range(BAND):
                    z = blend[r, idx[r, x]]
                    ln[r] = z.real + frac[r, x] * z.imag
        return
    for r in range(BAND):
        ir = idx[r]
        fr = frac[r]
        pr = pair[t_off:] if m == 1 else blend[r]
        row = vc[r]
        for x in range(x0, x1):
            z = pr[ir[x]]
            row[x] = z.real + fr[x] * z.imag


@nb.njit(cache=True)
def _lane_check(lanes, nx, bad):
    """Flag lines (lanes) holding NaN or ±inf in the first *nx* samples."""
    for x in range(nx):
        for r in range(BAND):
            if not np.isfinite(lanes[x, r]):
                bad[r] = 1


@nb.njit(cache=True)
def _lane_form(cf):
    """Which lane kernel runs the one-block line filter *cf* (0: none; the block goes
    through :func:`livecurve.engine.linefilters._filter_group` instead).  The same cases,
    with the same arithmetic, as the block kernel's fast paths."""
    n = int(cf[K_N])
    sr = cf[K_SLEW]
    last_only = cf[K_END] > 0.0
    for k in range(n - 1):
        if cf[K_C + k] != 0.0:
            last_only = False
    if n == 1 and sr > 0.0:
        return 1
    if n == 1 and last_only:
        return 2
    if last_only and n == 2 and sr <= 0.0:
        return 3
    tri = (cf[K_LIN + 1] == 0.0 and cf[K_LIN + 2] == 0.0 and cf[K_SLW + 1] == 0.0
           and cf[K_SLW + 2] == 0.0)
    if last_only and n == 3 and tri and sr <= 0.0:
        return 4
    return 0


@nb.njit(cache=True, fastmath={"contract"})
def _lane_filter(cf, form, blank, lanes, w, lane_st, start):
    """The block *cf* along the band's lines, one line a vector lane, in place on the
    first *w* samples of *lanes* (sample-major, a line a lane); the states in *lane_st*
    carry on from the previous block of samples unless *start*.  Each line starts at
    rest at the blanking level: u = x − blank, y = blank + C·x[n+1]
    (:mod:`livecurve.engine.linefilters`, eqs. 1 and 4)."""
    n = int(cf[K_N])
    a11, a12, _, g1, a21, a22, a23, g2, a31, a32, a33, g3 = lin_map(cf)
    cl = cf[K_C + n - 1]
    p = lane_st[0]
    q = lane_st[1]
    s = lane_st[2]
    d = lane_st[3]
    if start:
        for r in range(BAND):
            p[r] = 0.0
            q[r] = 0.0
            s[r] = 0.0
    if form == 1:
        e_slew = cf[K_E]
        step = cf[K_STEP]
        for j in range(w):
            ln = lanes[j]
            over = 0
            for r in range(BAND):
                u = ln[r] - blank
                dd = u - p[r]
                d[r] = dd
                q[r] = p[r]                      # the state before the sample
                p[r] = u - a11 * dd
                over += abs(dd) > e_slew
            if over:                             # a line at its rate limit: exact step
                for r in range(BAND):
                    if abs(d[r]) > e_slew:
                        p[r] = _one_state_slew(q[r], ln[r] - blank, a11, e_slew, step)
            for r in range(BAND):
                ln[r] = blank + cl * p[r]
    elif form == 2:
        for j in range(w):
            ln = lanes[j]
            for r in range(BAND):
                p[r] = g1 * (ln[r] - blank) + a11 * p[r]
                ln[r] = blank + cl * p[r]
    elif form == 3:
        for j in range(w):
            ln = lanes[j]
            for r in range(BAND):
                u = ln[r] - blank
                p0 = p[r]
                q0 = q[r]
                p[r] = g1 * u + a11 * p0 + a12 * q0
                q[r] = g2 * u + a21 * p0 + a22 * q0
                ln[r] = blank + cl * q[r]
    else:
        for j in range(w):
            ln = lanes[j]
            for r in range(BAND):
                u = ln[r] - blank
                p0 = p[r]
                q0 = q[r]
                s0 = s[r]
                p[r] = g1 * u + a11 * p0
                q[r] = g2 * u + a21 * p0 + a22 * q0 + a23 * s0
                s[r] = g3 * u + a31 * p0 + a32 * q0 + a33 * s0
                ln[r] = blank + cl * s[r]


@nb.njit(cache=True)
def _from_lanes(lanes, x0, x1, vc):
    """Lanes (samples x0 … x1−1, a line a lane) back into the band's lines (read in
    order, written across the lines: measured twice as fast as the other way round)."""
    for x in range(x0, x1):
        ln = lanes[x - x0]
        for r in range(BAND):
            vc[r, x] = ln[r]


@nb.njit(cache=True, fastmath=_FM)
def _convert(y, v, nv, i0, nr, sh, sv, rgb, act, conv, m_out, cout, oy, ocb, ocr, lstep):
    """Output converter for lines i0 … i0+nr−1, then 8-bit Y′CbCr (chroma resampled down)."""
    w = y.shape[1]
    half = 0.5 + TIE_EPS
    oy_lo, oy_span, oc_mid, oc_span, vlo, vhi = (cout[0], cout[1], cout[2], cout[3],
                                                 cout[4], cout[5])
    g0, g1, g2 = conv[0, 0], conv[0, 1], conv[0, 2]
    b0, b1, b2 = conv[1, 0], conv[1, 1], conv[1, 2]
    l0, l1, l2 = conv[2, 0], conv[2, 1], conv[2, 2]
    h0, h1, h2 = conv[3, 0], conv[3, 1], conv[3, 2]
    i0_, i1_, i2_ = conv[4, 0], conv[4, 1], conv[4, 2]
    j0, j1, j2 = conv[5, 0], conv[5, 1], conv[5, 2]
    m00, m01, m02 = m_out[0, 0], m_out[0, 1], m_out[0, 2]
    m10, m11, m12 = m_out[1, 0], m_out[1, 1], m_out[1, 2]
    m20, m21, m22 = m_out[2, 0], m_out[2, 1], m_out[2, 2]
    nnan = 0
    for r in range(nr):
        i = (i0 + r) * lstep
        p0 = v[0, r]
        p1 = v[1, r]
        p2 = v[2, r]
        q1 = nv[0, r]
        q2 = nv[1, r]
        oyr = oy[i]
        if rgb:
            for x in range(w):
                a0 = np.float64(p0[x])
                a1 = np.float64(p1[x])
                a2 = np.float64(p2[x])
                nnan += np.int64((a0 != a0) | (a1 != a1) | (a2 != a2))
                c0 = min(max(g0 * a0 + b0, l0), h0)
                c1 = min(max(g1 * a1 + b1, l1), h1)
                c2 = min(max(g2 * a2 + b2, l2), h2)
                r_ = min(max(np.floor(c0 + half) * i0_ + j0, 0.0), 1.0)
                g_ = min(max(np.floor(c1 + half) * i1_ + j1, 0.0), 1.0)
                b_ = min(max(np.floor(c2 + half) * i2_ + j2, 0.0), 1.0)
                n0 = m00 * r_ + m01 * g_ + m02 * b_
                oyr[x] = np.uint8(np.floor(min(max(oy_lo + n0 * oy_span, vlo), vhi) + half))
                q1[x] = np.float32(m10 * r_ + m11 * g_ + m12 * b_)
                q2[x] = np.float32(m20 * r_ + m21 * g_ + m22 * b_)
        else:
            if act[0]:
                for x in range(w):
                    a0 = np.float64(p0[x])
                    nnan += np.int64(a0 != a0)
                    c0 = min(max(g0 * a0 + b0, l0), h0)
                    n0 = np.floor(c0 + half) * i0_ + j0
                    oyr[x] = np.uint8(np.floor(min(max(oy_lo + n0 * oy_span, vlo), vhi)
                                               + half))
            if act[1]:
                for x in range(w):
                    a1 = np.float64(p1[x])
                    nnan += np.int64(a1 != a1)
                    c1 = min(max(g1 * a1 + b1, l1), h1)
                    q1[x] = np.float32(np.floor(c1 + half) * i1_ + j1)
            if act[2]:
                for x in range(w):
                    a2 = np.float64(p2[x])
                    nnan += np.int64(a2 != a2)
                    c2 = min(max(g2 * a2 + b2, l2), h2)
                    q2[x] = np.float32(np.floor(c2 + half) * i2_ + j2)
    # chroma out: every chroma line whose luma lines are all in this band
    ch_, cw = ocb.shape
    for cc in range(2):
        if not act[1 + cc]:
            continue
        o = ocb if cc == 0 else ocr
        src = nv[cc]
        if lstep > 1:            # each run line makes the chroma line it sits on
            k0 = 0
            k1 = nr
        elif sv:
            k0 = i0 >> 1
            k1 = (i0 + nr + 1) >> 1
        else:
            k0 = i0
            k1 = i0 + nr
        for kk in range(k0, k1):
            if lstep > 1:
                k = ((i0 + kk) * lstep) >> sv
                ra = kk
                rb = kk
            else:
                k = kk
                ra = (2 * k if sv else k) - i0
                rb = min(ra + 1, nr - 1) if sv else ra
            if k >= ch_:
                break
            sa = src[ra]
            sb = src[rb]
            orow = o[k]
            if sh:
                # [¼ ½ ¼] across: the edges (first, and last when W is odd) repeat the
                # last sample; the middle needs no clamping, so it vectorises
                j_hi = cw if 2 * (cw - 1) + 1 <= w - 1 else cw - 1
                for j in (0, cw - 1):
                    if j == cw - 1 and j < j_hi:
                        continue
                    xa = max(2 * j - 1, 0)
                    xb = 2 * j
                    xc = min(2 * j + 1, w - 1)
                    s = 0.125 * (np.float64(sa[xa]) + np.float64(sb[xa])
                                 + np.float64(sa[xc]) + np.float64(sb[xc])) \
                        + 0.25 * (np.float64(sa[xb]) + np.float64(sb[xb]))
                    val = oc_mid + s * oc_span
                    orow[j] = np.uint8(np.floor(min(max(val, vlo), vhi) + half))
                for j in range(1, j_hi):
                    s = 0.125 * (np.float64(sa[2 * j - 1]) + np.float64(sb[2 * j - 1])
                                 + np.float64(sa[2 * j + 1]) + np.float64(sb[2 * j + 1])) \
                        + 0.25 * (np.float64(sa[2 * j]) + np.float64(sb[2 * j]))
                    val = oc_mid + s * oc_span
                    orow[j] = np.uint8(np.floor(min(max(val, vlo), vhi) + half))
            else:
                for j in range(cw):
                    s = 0.5 * (np.float64(sa[j]) + np.float64(sb[j]))
                    val = oc_mid + s * oc_span
                    orow[j] = np.uint8(np.floor(min(max(val, vlo), vhi) + half))
    return nnan


def sampled_volts(y: np.ndarray, cb: np.ndarray, cr: np.ndarray, *, space: str,
                  standard: str, step: int = 4, in_legal: bool = True,
                  in_bits: int = 8) -> np.ndarray:
    """Centred channel volts of every *step*-th line and sample of Y′CbCr planes (8-bit,
    or *in_bits* codes in uint16 planes).

    For monitors and the flash estimate, which read pictures at a fixed, reduced cost:
    chroma is taken from the sample sited nearest (no interpolation).  Returns float32
    (3, ⌈H/step⌉, ⌈W/step⌉) in the chain's *space* (an ``rgb`` chain gets R′G′B′).
    """
    h, w = y.shape
    sh, sv = _subsampling(y.shape, cb.shape)
    cin = code_range(int(in_bits), legal=bool(in_legal))
    k = np.array([cin.y_lo, cin.y_span, cin.c_mid, cin.c_span], np.float32)
    m = ypbpr_to_rgb_matrix(standard).astype(np.float32)
    off = np.array(centre_offsets_v(space), np.float32)
    out = np.empty((3, (h + step - 1) // step, (w + step - 1) // step), np.float32)
    _sampled(y, cb, cr, int(step), sh, sv, k, m, off, space == "rgb", np.float32(Y_SPAN_V),
             out)
    return out


@nb.njit(cache=True, parallel=True, nogil=True)
def _sampled(y, cb, cr, step, sh, sv, k, m, off, rgb, span, out):
    ho, wo = out.shape[1], out.shape[2]
    y_lo, y_span, c_mid, c_span = k[0], k[1], k[2], k[3]
    for r in nb.prange(ho):
        i = r * step
        yr = y[i]
        br = cb[i >> sv]
        rr = cr[i >> sv]
        for c in range(wo):
            x = c * step
            yn = (np.float32(yr[x]) - y_lo) / y_span
            pb = (np.float32(br[x >> sh]) - c_mid) / c_span
            pr = (np.float32(rr[x >> sh]) - c_mid) / c_span
            if rgb:
                a0 = m[0, 0] * yn + m[0, 1] * pb + m[0, 2] * pr
                a1 = m[1, 0] * yn + m[1, 1] * pb + m[1, 2] * pr
                a2 = m[2, 0] * yn + m[2, 1] * pb + m[2, 2] * pr
            else:
                a0, a1, a2 = yn, pb, pr
            out[0, r, c] = a0 * span - off[0]
            out[1, r, c] = a1 * span - off[1]
            out[2, r, c] = a2 * span - off[2]
