"""Vectorscope numbers: a 2-D histogram of Pb (across) against Pr (up).

Colour-difference signals per ITU-R BT.601 / BT.709-6 / BT.2020:
``Pb = (B′ − Y′) / (2(1 − Kb))``, ``Pr = (R′ − Y′) / (2(1 − Kr))``, scaled to
the analog ±350 mV of the SMPTE ST 274 analog interface (Pb/Pr figure from
memory, see REFERENCES.md).  For frames in space ``"rgb"`` Pb and Pr are
computed from the R′G′B′ planes with the standard's matrix
(:func:`livecurve.signal.component.rgb_to_ypbpr_matrix`); its Pb and Pr rows
sum to zero, so the 350 mV centring of R′G′B′ cancels and the centred planes
can be used directly.

Cell mapping (the kernel and :func:`level_to_cell` share it; for space
``"ypbpr"`` bit for bit with ``pb_mv = float64(sample_v) · 1000``)
    ``col = floor((pb_mv + span_mv) · size / (2 · span_mv))``,
    ``row = floor((span_mv − pr_mv) · size / (2 · span_mv))``,
    with row 0 at the top (Pr = +span_mv) and column 0 at the left
    (Pb = −span_mv).  Points outside the square (or NaN) are not counted.

Colour bars
    :func:`bar_targets` gives the (Pb, Pr) of the six coloured bars of a bar
    signal with R′G′B′ at *amplitude* (0.75 for 75 % bars) through the same
    matrix; the 8-bit codes these give for BT.709 75 % bars are listed in
    REFERENCES.md (computed from BT.709; SMPTE RP 219 defines HD bars).

Skin-tone line
    :data:`SKIN_LINE_ANGLE_DEG` is the direction, measured counter-clockwise
    from the +Pb axis, along which skin tones of all complexions tend to lie:
    about 123°.  This is common practice among colourists and recalled from
    memory, not taken from a standard.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

from livecurve.errors import ConfigError
from livecurve.monitors.planes import check_out, check_planes, check_positive_int, use_threads
from livecurve.signal.component import Y_SPAN_V, check_space, rgb_to_ypbpr_matrix

#: Skin-tone line, degrees counter-clockwise from +Pb (common practice, from memory).
SKIN_LINE_ANGLE_DEG = 123.0

#: R′G′B′ (0…1) of the six coloured bars, in the order they appear left to right.
BAR_RGB = {
    "yellow": (1.0, 1.0, 0.0),
    "cyan": (0.0, 1.0, 1.0),
    "green": (0.0, 1.0, 0.0),
    "magenta": (1.0, 0.0, 1.0),
    "red": (1.0, 0.0, 0.0),
    "blue": (0.0, 0.0, 1.0),
}


def skin_line_angle_deg() -> float:
    """Direction of the skin-tone line, degrees counter-clockwise from +Pb.

    About 123°: common practice, from memory (no standard defines it).
    """
    return SKIN_LINE_ANGLE_DEG


def hue_angle_deg(pb, pr):
    """Angle of a (Pb, Pr) point, degrees counter-clockwise from +Pb, in [0, 360)."""
    return np.degrees(np.arctan2(pr, pb)) % 360.0


def bar_targets(standard: str, amplitude: float = 0.75) -> dict[str, tuple[float, float]]:
    """(Pb, Pr) in volts of the six coloured bars of a colour-bar signal.

    Parameters
    ----------
    standard : {"bt601", "bt709", "bt2020"}
    amplitude : float
        R′G′B′ level of the bars as a fraction of peak, in (0, 1]: 0.75 for 75 % bars,
        1.0 for 100 % bars.

    Returns
    -------
    dict
        name → (pb_v, pr_v), names as in :data:`BAR_RGB`.
    """
    amp = float(amplitude)
    if not (0.0 < amp <= 1.0):
        raise ConfigError("bar amplitude must be in (0, 1]", key="amplitude", value=amplitude)
    m = rgb_to_ypbpr_matrix(standard)
    out = {}
    for name, rgb in BAR_RGB.items():
        _, pb, pr = m @ (amp * np.array(rgb))
        out[name] = (float(pb * Y_SPAN_V), float(pr * Y_SPAN_V))
    return out


def _check_grid(size, span_mv) -> tuple[int, float]:
    size = check_positive_int(size, name="size", minimum=2, maximum=8192)
    span = float(span_mv)
    if not (np.isfinite(span) and span > 0):
        raise ConfigError("span_mv must be a positive number of millivolts", key="span_mv",
                          value=span_mv)
    return size, span


def level_to_cell(pb_mv, pr_mv, *, size: int = 257, span_mv: float = 400.0):
    """Vectorscope cell (row, col) of a (Pb, Pr) point in millivolts.

    Returns
    -------
    (row, col) : int64 or arrays of int64
        Mapping as in the module docstring; −1 in both for a point outside the
        square or NaN.
    """
    size, span = _check_grid(size, span_mv)
    s = size / (2.0 * span)
    fx = (np.asarray(pb_mv, dtype=np.float64) + span) * s
    fy = (span - np.asarray(pr_mv, dtype=np.float64)) * s
    with np.errstate(invalid="ignore"):
        inside = (fx >= 0) & (fx < size) & (fy >= 0) & (fy < size)
        col = np.where(inside, np.floor(np.nan_to_num(fx)), -1).astype(np.int64)
        row = np.where(inside, np.floor(np.nan_to_num(fy)), -1).astype(np.int64)
    if col.ndim == 0:
        return np.int64(row), np.int64(col)
    return row, col


def vectorscope(planes, *, space: str, standard: str, size: int = 257, span_mv: float = 400.0,
                out=None) -> np.ndarray:
    """2-D histogram of Pb (columns, left to right) against Pr (rows, bottom to top).

    Parameters
    ----------
    planes : array_like, shape (3, H, W)
        Zero-centred channel volts of signal space *space*.
    space : {"ypbpr", "rgb"}
    standard : {"bt601", "bt709", "bt2020"}
        Colour standard whose matrix turns R′G′B′ into Pb/Pr (space "rgb"); checked
        but not needed for space "ypbpr".
    size : int
        Cells per side, 2…8192.  The default is odd so that Pb = Pr = 0 is the
        centre of a cell: with an even size a grey picture would scatter over
        the four cells meeting at the centre by float32 rounding alone (and the
        75 % BT.709 yellow bar would sit exactly on a cell edge at 256).
    span_mv : float
        Half-width of the square in mV: Pb and Pr from −span_mv to +span_mv.
        The default 400 mV leaves a margin around the nominal ±350 mV.
    out : ndarray of uint32, shape (size, size), optional
        Buffer to reuse; every element is overwritten.

    Returns
    -------
    ndarray of uint32, shape (size, size)
        ``counts[row, col]`` with the cell mapping of the module docstring.
    """
    planes = check_planes(planes)
    if planes.shape[1] * planes.shape[2] >= 2**32:
        raise ConfigError("frame too large for 32-bit counts", key="planes", value=planes.shape)
    size, span = _check_grid(size, span_mv)
    m = rgb_to_ypbpr_matrix(standard)
    if check_space(space) == "ypbpr":
        mix = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
        direct = True
    else:
        mix = np.ascontiguousarray(m[1:] * 1.0)
        # Pb/Pr rows sum to zero, so the R′G′B′ centring offset cancels (module docstring).
        assert np.all(np.abs(mix.sum(axis=1)) < 1e-12)
        direct = False
    out = check_out(out, (size, size), np.uint32)
    cells_per_mv = size / (2.0 * span)
    if use_threads(planes.shape[1] * planes.shape[2]):
        scratch = np.empty((numba.get_num_threads(), size, size), dtype=np.uint32)
        _vectorscope_par(planes, mix, direct, span, cells_per_mv, scratch, out)
    else:
        _vectorscope_ser(planes, mix, direct, span, cells_per_mv, out)
    return out


@numba.njit(cache=True)
def _vectorscope_rows(planes, mix, direct, span_mv, cells_per_mv, hist, y0, y1):
    """Zero *hist* and count picture rows y0…y1−1 into it (mapping in the module docstring)."""
    w = planes.shape[2]
    size = hist.shape[0]
    fsize = np.float64(size)
    for r in range(size):
        for c in range(size):
            hist[r, c] = 0
    for y in range(y0, y1):
        for x in range(w):
            if direct:
                pb_v = np.float64(planes[1, y, x])
                pr_v = np.float64(planes[2, y, x])
            else:
                r_v = np.float64(planes[0, y, x])
                g_v = np.float64(planes[1, y, x])
                b_v = np.float64(planes[2, y, x])
                pb_v = mix[0, 0] * r_v + mix[0, 1] * g_v + mix[0, 2] * b_v
                pr_v = mix[1, 0] * r_v + mix[1, 1] * g_v + mix[1, 2] * b_v
            fx = (pb_v * 1000.0 + span_mv) * cells_per_mv
            fy = (span_mv - pr_v * 1000.0) * cells_per_mv
            if fx >= 0.0 and fx < fsize and fy >= 0.0 and fy < fsize:
                hist[int(fy), int(fx)] += 1


@numba.njit(cache=True, parallel=True)
def _vectorscope_par(planes, mix, direct, span_mv, cells_per_mv, scratch, out):
    """One private histogram per thread over a band of rows, then a parallel sum."""
    h = planes.shape[1]
    nt, size = scratch.shape[0], scratch.shape[1]
    for t in prange(nt):
        _vectorscope_rows(planes, mix, direct, span_mv, cells_per_mv, scratch[t],
                          t * h // nt, (t + 1) * h // nt)
    for r in prange(size):
        for c in range(size):
            acc = np.uint32(0)
            for t in range(nt):
                acc += scratch[t, r, c]
            out[r, c] = acc


@numba.njit(cache=True)
def _vectorscope_ser(planes, mix, direct, span_mv, cells_per_mv, out):
    """The whole frame on the calling thread (small frames)."""
    _vectorscope_rows(planes, mix, direct, span_mv, cells_per_mv, out, 0, planes.shape[1])
