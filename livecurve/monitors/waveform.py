"""Waveform monitor numbers: a histogram of signal level per picture column.

Levels are the analog component levels of the SMPTE ST 274 analog interface:
Y′ and R′G′B′ 0…700 mV above blanking, Pb/Pr ±350 mV (Pb/Pr figure from
memory, see REFERENCES.md).  The engine's planes are zero-centred, so the
level of a sample is ``plane volts + centre_offsets_v(space)``
(:mod:`livecurve.signal.component`).

Display shift of the colour-difference traces
    For space ``"ypbpr"`` the Pb and Pr traces are drawn 350 mV higher than
    their real level, so their zero sits at 350 mV, half way between the 0 and
    700 mV graticule lines, and their ±350 mV swing fills the same height as
    Y′.  :func:`trace_offsets_v` gives the volts added to each centred plane
    (350 mV for every channel in both spaces: Y′/R′G′B′ by their centring,
    Pb/Pr by this display shift).

Level-to-row mapping (the kernel and :func:`level_to_row` share it)
    ``f = (hi_mv − level_mv) · rows / (hi_mv − lo_mv)``,
    ``row = floor(f)`` clamped to ``0 … rows−1``.
    Row 0 is the top (``hi_mv``); a level exactly at ``hi_mv`` lands in row 0.
    Levels outside ``lo_mv … hi_mv`` pile up in the edge rows, so no sample is
    lost from the count; NaN samples are not counted.  The kernel evaluates
    the same line in float64 with the level ``(sample_v + offset_v) · 1000``
    expanded (``f = a_c − sample_v · b``), so it can differ from
    :func:`level_to_row` only for a level within rounding (~1e-12 row) of a
    row boundary.

Column mapping
    Picture column ``x`` of ``W`` goes to waveform column ``x · cols // W``.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

from livecurve.errors import ConfigError
from livecurve.monitors.planes import check_out, check_planes, check_positive_int, use_threads
from livecurve.signal.component import C_PEAK_V, centre_offsets_v, check_space

#: Levels (mV) of the graticule lines every waveform panel shows: blanking and peak white.
GRATICULE_MV = (0.0, 700.0)

#: Output columns handled by one task (its rows × 64 block of counts stays in cache).
_CHUNK_COLS = 64


def trace_offsets_v(space: str) -> np.ndarray:
    """Volts added to each zero-centred plane to get its waveform level.

    Equals ``centre_offsets_v(space)`` plus the 350 mV display shift of the Pb
    and Pr traces in space ``"ypbpr"`` (see the module docstring).

    Returns
    -------
    ndarray, shape (3,), float64, volts
    """
    space = check_space(space)
    offs = np.array(centre_offsets_v(space), dtype=np.float64)
    if space == "ypbpr":
        offs[1:] += C_PEAK_V
    return offs


def _check_scale(rows, lo_mv, hi_mv) -> tuple[int, float, float]:
    rows = check_positive_int(rows, name="rows", minimum=2, maximum=65536)
    lo, hi = float(lo_mv), float(hi_mv)
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise ConfigError("need finite lo_mv < hi_mv", key="lo_mv/hi_mv", value=(lo_mv, hi_mv))
    return rows, lo, hi


def level_to_row(mv, *, rows: int = 256, lo_mv: float = -50.0, hi_mv: float = 750.0):
    """Waveform row of a level in millivolts (row 0 at the top, ``hi_mv``).

    Parameters
    ----------
    mv : float or array_like
        Level in mV as drawn (for Pb/Pr in space "ypbpr" include the 350 mV shift).
    rows, lo_mv, hi_mv
        As in :func:`waveform`.

    Returns
    -------
    int64 or ndarray of int64
        ``floor((hi_mv − mv) · rows / (hi_mv − lo_mv))`` clamped to ``0 … rows−1``;
        −1 for NaN.
    """
    rows, lo, hi = _check_scale(rows, lo_mv, hi_mv)
    scale = rows / (hi - lo)
    f = (hi - np.asarray(mv, dtype=np.float64)) * scale
    with np.errstate(invalid="ignore"):
        r = np.where(np.isnan(f), -1, np.clip(np.floor(np.nan_to_num(f)), 0, rows - 1))
    r = r.astype(np.int64)
    return r if r.ndim else np.int64(r)


def row_to_level_mv(row, *, rows: int = 256, lo_mv: float = -50.0, hi_mv: float = 750.0):
    """Level (mV) at the top edge of a waveform row: inverse of :func:`level_to_row`.

    Returns
    -------
    float or ndarray of float64
        ``hi_mv − row · (hi_mv − lo_mv) / rows``.
    """
    rows, lo, hi = _check_scale(rows, lo_mv, hi_mv)
    return hi - np.asarray(row, dtype=np.float64) * (hi - lo) / rows


def waveform(planes, *, space: str, rows: int = 256, columns: int | None = None,
             lo_mv: float = -50.0, hi_mv: float = 750.0, channels=(0, 1, 2),
             out=None) -> np.ndarray:
    """Histogram of level per picture column for each of the three channels.

    Parameters
    ----------
    planes : array_like, shape (3, H, W)
        Zero-centred channel volts of signal space *space*.
    space : {"ypbpr", "rgb"}
    rows : int
        Level bins (vertical resolution), 2…65536.
    columns : int or None
        Waveform columns; None gives one per picture column, a smaller number
        bins picture columns (``x · columns // W``).  At most W.
    lo_mv, hi_mv : float
        Levels (mV) at the bottom and top edges of the histogram.
    channels : sequence of int
        Channels to count (0, 1, 2); the others are returned as zeros.  Counting
        only channel 0 (Y′ alone) costs a third of all three.
    out : ndarray of uint32, shape (3, rows, columns), optional
        Buffer to reuse; every element is overwritten.

    Returns
    -------
    ndarray of uint32, shape (3, rows, columns)
        ``counts[c, r, j]``: samples of channel *c* in the picture columns binned
        to *j* whose level falls in row *r* (mapping in the module docstring).
        Each counted column sums to the number of non-NaN samples in its
        picture columns.
    """
    planes = check_planes(planes)
    rows, lo, hi = _check_scale(rows, lo_mv, hi_mv)
    height, width = planes.shape[1:]
    if height * width >= 2**32:
        raise ConfigError("frame too large for 32-bit counts", key="planes", value=planes.shape)
    cols = width if columns is None else check_positive_int(columns, name="columns",
                                                            maximum=width)
    chans = _check_channels(channels)
    scale = rows / (hi - lo)
    a_c = (hi - 1000.0 * trace_offsets_v(space)) * scale
    colmap = (np.arange(width, dtype=np.int64) * cols // width).astype(np.int32)
    out = check_out(out, (3, rows, cols), np.uint32)
    for c in range(3):
        if c not in chans:
            out[c] = 0
    kernel = _waveform_par if use_threads(len(chans) * height * width) else _waveform_ser
    kernel(planes, np.array(chans, dtype=np.int64), a_c, 1000.0 * scale, colmap, out)
    return out


def _check_channels(channels) -> tuple[int, ...]:
    try:
        chans = tuple(sorted({int(c) for c in channels}))
    except (TypeError, ValueError):
        raise ConfigError("expected a sequence of channel numbers 0, 1, 2",
                          key="channels", value=channels) from None
    if not chans or any(c not in (0, 1, 2) for c in chans):
        raise ConfigError("expected a non-empty sequence of channel numbers 0, 1, 2",
                          key="channels", value=channels)
    return chans


@numba.njit(cache=True)
def _waveform_task(planes, chans, a_c, b, colmap, out, task, nchunks):
    """Count one (channel, chunk of output columns) task into out[c, :, j0:j1].

    row = floor(a_c[c] − v·b) clamped to 0…rows−1, with b = 1000·rows/(hi−lo) and
    a_c = (hi − 1000·offset_c)·rows/(hi−lo): the module's mapping with the level
    (v + offset_c)·1000 mV expanded.  NaN samples are skipped.  Counts go to a
    small contiguous block first (kept in cache), then to *out*.
    """
    h, w = planes.shape[1], planes.shape[2]
    rows = out.shape[1]
    ncols = out.shape[2]
    fmax = rows - 1.0
    c = chans[task // nchunks]
    j0 = (task % nchunks) * _CHUNK_COLS
    j1 = min(j0 + _CHUNK_COLS, ncols)
    block = np.zeros((rows, _CHUNK_COLS), dtype=np.uint32)
    pc = planes[c]
    # picture columns of output columns j0…j1−1: x with x·ncols // w in that range
    x0 = (j0 * w + ncols - 1) // ncols
    x1 = (j1 * w + ncols - 1) // ncols
    a = a_c[c]
    if ncols == w:
        for y in range(h):
            line = pc[y]
            for x in range(x0, x1):
                f = a - np.float64(line[x]) * b
                if f != f:
                    continue
                block[int(min(max(f, 0.0), fmax)), x - j0] += 1
    else:
        for y in range(h):
            line = pc[y]
            for x in range(x0, x1):
                f = a - np.float64(line[x]) * b
                if f != f:
                    continue
                block[int(min(max(f, 0.0), fmax)), colmap[x] - j0] += 1
    oc = out[c]
    for r in range(rows):
        for j in range(j0, j1):
            oc[r, j] = block[r, j - j0]


@numba.njit(cache=True, parallel=True)
def _waveform_par(planes, chans, a_c, b, colmap, out):
    """Tasks (channel × chunk of 64 output columns) spread over the threads."""
    nchunks = (out.shape[2] + _CHUNK_COLS - 1) // _CHUNK_COLS
    for task in prange(chans.size * nchunks):
        _waveform_task(planes, chans, a_c, b, colmap, out, task, nchunks)


@numba.njit(cache=True)
def _waveform_ser(planes, chans, a_c, b, colmap, out):
    """Same tasks on the calling thread (small frames)."""
    nchunks = (out.shape[2] + _CHUNK_COLS - 1) // _CHUNK_COLS
    for task in range(chans.size * nchunks):
        _waveform_task(planes, chans, a_c, b, colmap, out, task, nchunks)
