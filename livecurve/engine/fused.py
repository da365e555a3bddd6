"""One pass per line: 8-bit Y′CbCr planes through a whole chain and its output converter.

The reference path turns a decoded picture into R′G′B′ codes, then into planar volts
(:func:`livecurve.signal.levels.codes_to_volts`), runs each channel's tables and line
filters over whole planes (:class:`livecurve.engine.pipeline.FrameEngine`), and turns
the volts back into codes (:func:`~livecurve.signal.levels.volts_to_codes`).  Every step
streams full frames through memory.  This module does the same arithmetic in one numba
kernel that walks four scan lines at a time while they sit in cache, parallel over
bands of lines, and stays in the clip's own Y′CbCr domain:

codes → volts
    Y′ = (code − y_lo)/y_span, Pb/Pr = (code − c_mid)/c_span (ITU-R BT.601/BT.709 code
    levels, :mod:`livecurve.signal.codes`), scaled to 700 mV and centred; an ``rgb``
    chain takes one matrix (Y′PbPr → R′G′B′ of the standard) here.
each run's table, then its line filter
    The same (bi)linear lookup as :mod:`livecurve.engine.tables` (float32) and the very
    line-filter routine of :mod:`livecurve.engine.linefilters`, so a line comes out as
    the reference path's does.
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
stages goes through the converter as a 256-entry table of codes.

What the kernel does not do (the caller keeps the reference path for these): the solver
per pixel (``--exact``), controls varying per pixel, sources deeper than 8 bits.
"""

from __future__ import annotations

import numba as nb
import numpy as np

from livecurve.engine.linefilters import N_COEF, _filter_group
from livecurve.errors import MediaError, SolverError
from livecurve.signal.codes import code_range
from livecurve.signal.component import (
    Y_SPAN_V,
    centre_offsets_v,
    rgb_to_ypbpr_matrix,
    ypbpr_to_rgb_matrix,
)
from livecurve.signal.levels import TIE_EPS, _converter_ranges

#: Lines handled together (the line filters' own group of rows).
BAND = 4

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
    """A :class:`~livecurve.engine.pipeline.FrameEngine` compiled for 8-bit Y′CbCr planes.

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
    """

    def __init__(self, engine, *, space: str, standard: str, converter_bits: int = 10,
                 converter_legal: bool = True, in_legal: bool = True):
        self.engine = engine
        self.in_legal = bool(in_legal)
        self.space = space
        self.standard = standard
        cin = code_range(8, legal=bool(in_legal))
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
        codes = np.arange(256, dtype=np.float64)
        y_lo, y_span, c_mid, c_span = self._in
        luts = np.zeros((3, 256), np.uint8)
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
                controls: dict | None = None, out=None):
        """Run one frame of 8-bit Y′CbCr planes through the chain and the converter.

        Parameters
        ----------
        y : ndarray (H, W) uint8
        cb, cr : ndarray uint8, shape (H, W), (H, ⌈W/2⌉) or (⌈H/2⌉, ⌈W/2⌉)
            4:4:4, 4:2:2 or 4:2:0 chroma.
        controls : dict, optional
            Modulated knob → a scalar or one value per line (as
            :meth:`FrameEngine.process` takes them; per-pixel controls are not fused).
        out : tuple of three ndarrays, optional
            Output planes of the input planes' shapes (may not be the inputs).

        Returns
        -------
        tuple (y, cb, cr) of uint8 planes, legal range.
        """
        h, w = y.shape
        sh, sv = _subsampling(y.shape, cb.shape)
        if cr.shape != cb.shape:
            raise MediaError(f"Cb plane {cb.shape} and Cr plane {cr.shape} differ")
        if out is None:
            out = (np.empty_like(y), np.empty_like(cb), np.empty_like(cr))
        self._pack()
        cpos = self._cpos(controls or {}, h)
        oy, ocb, ocr = out
        act = self._active
        rgb = self.space == "rgb"
        if not act[0]:
            np.take(self._luts[0], y, out=oy)
        if not rgb and not act[1]:
            np.take(self._luts[1], cb, out=ocb)
        if not rgb and not act[2]:
            np.take(self._luts[2], cr, out=ocr)
        if act.any():
            stats = np.zeros(2, np.int64)
            n_chunks = max(1, 4 * nb.get_num_threads())
            _fused(y, cb, cr, sh, sv, self._in, self._m_in, self._m_out, self._off, rgb,
                   act.astype(np.uint8), self._chan_runs, self._runs, self._tab, cpos,
                   self._coef, self._conv, self._out, oy, ocb, ocr, stats, n_chunks)
            if stats[1]:
                raise MediaError("a line filter met NaN or infinite volts; line filters need "
                                 "finite volts")
            if stats[0]:
                raise SolverError(f"the chain produced NaN in {int(stats[0])} pixels: values "
                                  "no converter can encode")
        return out


def _subsampling(luma: tuple, chroma: tuple) -> tuple[int, int]:
    """(horizontal, vertical) chroma shift: 0 for full resolution, 1 for half."""
    h, w = luma
    for sh in (0, 1):
        for sv in (0, 1):
            if chroma == ((h + sv) >> sv, (w + sh) >> sh):
                return sh, sv
    raise MediaError(f"chroma planes {chroma} do not fit a {w}x{h} picture as 4:4:4, 4:2:2 "
                     "or 4:2:0")


@nb.njit(cache=True)
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
        for x in range(0, w, 2):
            out[x] = tmp[x >> 1]
        for x in range(1, w, 2):
            j = x >> 1
            out[x] = 0.5 * (tmp[j] + tmp[min(j + 1, cw - 1)])
    else:
        for x in range(w):
            out[x] = tmp[x]


@nb.njit(cache=True, fastmath=True)
def _table_rows(v, nrows, tab, off, n, m, lo, inv, cpos_row):
    """Rows 0…nrows−1 of *v* (4, W) through one table in place (1-D, or 2-D at the rows'
    control columns) — the lookup of :mod:`livecurve.engine.tables`."""
    w = v.shape[1]
    top = n - 1
    last = np.float32(top)
    for r in range(nrows):
        if m == 1:
            for x in range(w):
                p = (v[r, x] - lo) * inv
                p = min(max(p, np.float32(0.0)), last)
                i = min(int(p), top - 1)
                f = p - np.float32(i)
                t0 = tab[off + i]
                v[r, x] = t0 + f * (tab[off + i + 1] - t0)
        else:
            j = min(int(cpos_row[r]), m - 2)
            g = cpos_row[r] - np.float32(j)
            b0 = off + j * n
            b1 = b0 + n
            for x in range(w):
                p = (v[r, x] - lo) * inv
                p = min(max(p, np.float32(0.0)), last)
                i = min(int(p), top - 1)
                f = p - np.float32(i)
                a = tab[b0 + i] + g * (tab[b1 + i] - tab[b0 + i])
                b = tab[b0 + i + 1] + g * (tab[b1 + i + 1] - tab[b0 + i + 1])
                v[r, x] = a + f * (b - a)


@nb.njit(cache=True, parallel=True, nogil=True)
def _fused(y, cb, cr, sh, sv, cin, m_in, m_out, off, rgb, act, chan_runs, runs, tab, cpos,
           coef, conv, cout, oy, ocb, ocr, stats, n_chunks):
    h, w = y.shape
    n_groups = (h + BAND - 1) // BAND
    n_chunks = max(1, min(n_groups, n_chunks))
    nan_total = 0
    bad_total = 0
    for chunk in nb.prange(n_chunks):
        v = np.zeros((3, BAND, w), np.float32)
        cp = np.zeros(BAND, np.float32)
        nv = np.zeros((2, BAND, w), np.float32)   # normalised Pb, Pr out, full resolution
        bad = np.zeros(BAND, np.uint8)
        lfbuf = np.zeros((BAND, w), np.float64)
        pad_in = np.zeros(w, np.float32)
        pad_out = np.zeros(w, np.float32)
        st = np.zeros((BAND, 3))
        xs = np.zeros(3)
        xn = np.zeros(3)
        nan_c = 0
        bad_c = 0
        for grp in range(chunk * n_groups // n_chunks, (chunk + 1) * n_groups // n_chunks):
            i0 = grp * BAND
            nr = min(BAND, h - i0)
            _to_volts(y, cb, cr, sh, sv, cin, m_in, off, rgb, act, i0, nr, v)
            bad_c += _runs_band(v, act, chan_runs, runs, tab, cpos, coef, i0, nr, cp, bad,
                                lfbuf, pad_in, pad_out, st, xs, xn)
            nan_c += _convert(y, v, nv, i0, nr, sh, sv, rgb, act, conv, m_out, cout,
                              oy, ocb, ocr)
        nan_total += nan_c
        bad_total += bad_c
    stats[0] = nan_total
    stats[1] = bad_total


@nb.njit(cache=True)
def _to_volts(y, cb, cr, sh, sv, cin, m_in, off, rgb, act, i0, nr, v):
    """Lines i0 … i0+nr−1 of codes into centred volts, v (3, BAND, W)."""
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
        i = i0 + r
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
def _runs_band(v, act, chan_runs, runs, tab, cpos, coef, i0, nr, cp, bad, lfbuf, pad_in,
               pad_out, st, xs, xn):
    """Every run of every active channel over one band; returns lines with NaN/inf."""
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
            kc = int(rd[_R_CPOS])
            if kc >= 0:
                for r in range(BAND):
                    cp[r] = cpos[kc, min(i0 + r, cpos.shape[1] - 1)]
            _table_rows(vc, BAND, tab, int(rd[_R_TAB]), n, m, np.float32(rd[_R_LO]),
                        np.float32(rd[_R_INV]), cp)
            nlf = int(rd[_R_NLF])
            if nlf > 0:
                lf0 = int(rd[_R_LF])
                for r in range(BAND):
                    bad[r] = 0
                _filter_group(vc, vc.view(np.uint32), coef[lf0:lf0 + nlf], rd[_R_BLANK], vc,
                              bad, 0, lfbuf, pad_in, pad_out, st, xs, xn)
                for r in range(nr):
                    bad_lines += bad[r]
    return bad_lines


@nb.njit(cache=True)
def _convert(y, v, nv, i0, nr, sh, sv, rgb, act, conv, m_out, cout, oy, ocb, ocr):
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
        i = i0 + r
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
        if sv:
            k0 = i0 >> 1
            k1 = (i0 + nr + 1) >> 1
        else:
            k0 = i0
            k1 = i0 + nr
        for k in range(k0, min(k1, ch_)):
            ra = (2 * k if sv else k) - i0
            rb = min(ra + 1, nr - 1) if sv else ra
            sa = src[ra]
            sb = src[rb]
            orow = o[k]
            for j in range(cw):
                if sh:
                    xa = max(2 * j - 1, 0)
                    xb = 2 * j
                    xc = min(2 * j + 1, w - 1)
                    s = 0.125 * (np.float64(sa[xa]) + np.float64(sb[xa])
                                 + np.float64(sa[xc]) + np.float64(sb[xc])) \
                        + 0.25 * (np.float64(sa[xb]) + np.float64(sb[xb]))
                else:
                    s = 0.5 * (np.float64(sa[j]) + np.float64(sb[j]))
                val = oc_mid + s * oc_span
                orow[j] = np.uint8(np.floor(min(max(val, vlo), vhi) + half))
    return nnan


def sampled_volts(y: np.ndarray, cb: np.ndarray, cr: np.ndarray, *, space: str,
                  standard: str, step: int = 4, in_legal: bool = True) -> np.ndarray:
    """Centred channel volts of every *step*-th line and sample of 8-bit Y′CbCr planes.

    For monitors and the flash estimate, which read pictures at a fixed, reduced cost:
    chroma is taken from the sample sited nearest (no interpolation).  Returns float32
    (3, ⌈H/step⌉, ⌈W/step⌉) in the chain's *space* (an ``rgb`` chain gets R′G′B′).
    """
    h, w = y.shape
    sh, sv = _subsampling(y.shape, cb.shape)
    rows = np.arange(0, h, step)
    cols = np.arange(0, w, step)
    cin = code_range(8, legal=bool(in_legal))
    yn = (y[::step, ::step].astype(np.float32) - np.float32(cin.y_lo)) / np.float32(cin.y_span)
    crow = (rows >> sv)[:, None]
    ccol = (cols >> sh)[None, :]
    pb = (cb[crow, ccol].astype(np.float32) - np.float32(cin.c_mid)) / np.float32(cin.c_span)
    pr = (cr[crow, ccol].astype(np.float32) - np.float32(cin.c_mid)) / np.float32(cin.c_span)
    n = np.stack([yn, pb, pr])
    if space == "rgb":
        n = np.tensordot(ypbpr_to_rgb_matrix(standard).astype(np.float32), n, axes=1)
    off = np.array(centre_offsets_v(space), np.float32)[:, None, None]
    return np.ascontiguousarray(n * np.float32(Y_SPAN_V) - off, dtype=np.float32)
