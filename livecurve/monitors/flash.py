"""Photosensitive flash estimate after ITU-R BT.1702, fed one frame at a time.

Caveat: the thresholds below are ITU-R BT.1702 (2005) as recalled **from
memory** and cross-checked only against secondary summaries (REFERENCES.md
marks them so).  Check the Recommendation's wording before relying on exact
thresholds; this meter is an estimate for previewing, not a compliance test.

Rules used
    * Screen luminance from the signal through a display EOTF: ITU-R BT.1886,
      ``L = a · max(V + b, 0)^2.4`` with ``a = (Lw^(1/γ) − Lb^(1/γ))^γ`` and
      ``b = Lb^(1/γ) / (Lw^(1/γ) − Lb^(1/γ))``, γ = 2.4; peak white Lw defaults
      to 200 cd/m² and black Lb to 0.  The EOTF is applied to each of R′, G′,
      B′ (Y′PbPr frames are first turned into R′G′B′ with the standard's
      matrix) and luminance is ``Kr·R + Kg·G + Kb·B`` with the standard's luma
      weights.  Applying the EOTF to Y′ alone would under-read saturated
      colours; for BT.709 the luma weights are the luminance row of its
      primaries, for BT.601 they are an approximation.
    * General flash: a pair of opposing luminance transitions, each of at
      least 20 cd/m², where the darker of the two levels of a transition is
      below 160 cd/m² (BT.1702, from memory).
    * Saturated-red flash: a pair of opposing transitions where, for either
      state of a transition, ``R/(R + G + B) ≥ 0.8`` and the change of
      ``max(0, R − G − B) · 320`` is more than 20, with R, G, B linear and
      relative to peak white (the working definition attributed to Harding &
      Binnie 2002, as quoted on the W3C WAI guidelines mailing list in
      October 2007; not checked against the primary source).
    * Area: the screen is cut into a grid of cells; a cell's level is its
      mean linear R, G, B.  Flashes count when the cells that flash together
      cover at least 25 % of the screen (``area_threshold``).  A partly
      covered cell changes by a part of the patch's contrast, and counts with
      its whole area once that part passes the thresholds: the cell size
      sets the resolution of the area estimate.
    * Rate: more than 3 flashes in any 1 s window is a hazard.

How transitions are found (per cell, streaming)
    A swing starts at a turning point and follows the level while it keeps
    moving the same way; it reverses once the level has come back from the
    swing's extreme by the transition threshold.  A swing counts as one
    transition, at the first frame where it meets the rule above.  Flashes in
    a window are ``transitions // 2`` (a flash is a pair of transitions).

Screen rate and verdict (our own reading, documented here)
    A frame's *screen flash count* is the largest k such that cells with at
    least k flashes in the last second cover ``area_threshold`` of the
    screen.  Verdict ``"hazard"``: a screen count above 3 (general or red).
    ``"warn"``: a screen count of exactly 3 (at the limit), or cells with more
    than 3 flashes covering at least ``warn_area_share`` (default 20 %, our
    choice) but less than ``area_threshold``.  Otherwise ``"ok"``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numba
import numpy as np
from numba import prange

from livecurve.errors import ConfigError
from livecurve.monitors.planes import check_planes, check_positive_int, use_threads
from livecurve.signal.component import (
    Y_SPAN_V,
    centre_offsets_v,
    check_space,
    luma_weights,
    ypbpr_to_rgb_matrix,
)

#: BT.1886 exponent.
GAMMA = 2.4
#: General-flash transition threshold, cd/m² (BT.1702, from memory).
FLASH_DELTA_CD_M2 = 20.0
#: The darker level of a general transition must be below this, cd/m² (BT.1702, from memory).
FLASH_DARK_MAX_CD_M2 = 160.0
#: Saturated red: R/(R+G+B) at or above this in either state (Harding & Binnie, from memory).
RED_RATIO_MIN = 0.8
#: Red transition: change of max(0, R−G−B)·320 must exceed this (same source).
RED_DELTA = 20.0
RED_SCALE = 320.0
#: More flashes than this in any 1 s window is a hazard (BT.1702, from memory).
FLASH_LIMIT_PER_S = 3
#: Share of the screen the flashing cells must cover (BT.1702, from memory).
AREA_THRESHOLD = 0.25

_LUT_SIZE = 4097
_VERDICTS = ("ok", "warn", "hazard")


def bt1886_eotf(v, *, white_cd_m2: float = 200.0, black_cd_m2: float = 0.0):
    """ITU-R BT.1886 reference EOTF: normalised signal (0…1) to luminance in cd/m².

    ``L = a · max(V + b, 0)^2.4``, ``a = (Lw^(1/2.4) − Lb^(1/2.4))^2.4``,
    ``b = Lb^(1/2.4) / (Lw^(1/2.4) − Lb^(1/2.4))``.  *v* is clipped to 0…1
    first: a display shows nothing below black or above its peak white.

    Parameters
    ----------
    v : float or array_like
        Normalised R′, G′ or B′ (0 black, 1 peak white).
    white_cd_m2, black_cd_m2 : float
        Screen luminance of peak white and of black, cd/m².

    Returns
    -------
    float64 or ndarray of float64, cd/m²
    """
    lw, lb = _check_display(white_cd_m2, black_cd_m2)
    d = lw ** (1 / GAMMA) - lb ** (1 / GAMMA)
    a = d**GAMMA
    b = lb ** (1 / GAMMA) / d
    vv = np.clip(np.asarray(v, dtype=np.float64), 0.0, 1.0)
    return a * np.maximum(vv + b, 0.0) ** GAMMA


def _check_display(white, black) -> tuple[float, float]:
    lw, lb = float(white), float(black)
    if not (np.isfinite(lw) and np.isfinite(lb) and 0.0 <= lb < lw):
        raise ConfigError("need finite 0 <= black_cd_m2 < peak_white_cd_m2",
                          key="peak_white_cd_m2/black_cd_m2", value=(white, black))
    return lw, lb


@dataclass(frozen=True, eq=False)
class FlashFrame:
    """What one frame added.

    Attributes
    ----------
    index : int
        Frame number since the start (or the last reset).
    time_s : float
        index / fps.
    mean_cd_m2 : float
        Screen mean luminance.
    cells_cd_m2 : ndarray, shape (grid rows, grid columns)
        Mean luminance of each cell.
    flashes, red_flashes : int
        Screen flash count (general / saturated red) in the 1 s window ending here.
    area_over_limit, red_area_over_limit : float
        Share of the screen whose cells flashed more than the limit in that window.
    level : {"ok", "warn", "hazard"}
        Rating of this window.
    """

    index: int
    time_s: float
    mean_cd_m2: float
    cells_cd_m2: np.ndarray = field(repr=False)
    flashes: int = 0
    red_flashes: int = 0
    area_over_limit: float = 0.0
    red_area_over_limit: float = 0.0
    level: str = "ok"


@dataclass(frozen=True, eq=False)
class FlashReport:
    """Summary of a whole run of frames.

    Attributes
    ----------
    verdict : {"ok", "warn", "hazard"}
    frames : int
    max_flashes_per_s, max_red_flashes_per_s : int
        Largest screen flash count in any 1 s window (general / saturated red).
    max_area_over_limit, max_red_area_over_limit : float
        Largest share of the screen whose cells flashed more than the limit in 1 s.
    first_hazard_s : float or None
        Time of the first frame rated hazard.
    mean_cd_m2 : ndarray, shape (frames,)
        Screen mean luminance per frame.
    """

    verdict: str
    frames: int
    fps: float
    max_flashes_per_s: int
    max_red_flashes_per_s: int
    max_area_over_limit: float
    max_red_area_over_limit: float
    first_hazard_s: float | None
    mean_cd_m2: np.ndarray = field(repr=False)


def cell_luminance(rgb: np.ndarray, weights) -> np.ndarray:
    """Luminance of each cell, Kr·R + Kg·G + Kb·B (cd/m²), summed left to right.

    Written out rather than as a matrix product: a BLAS product may sum in another order
    or fuse the multiply-adds depending on the machine, which moves a level exactly on a
    threshold (160 cd/m², 20 cd/m²) by one unit in the last place."""
    rgb = np.asarray(rgb, dtype=np.float64)
    kr, kg, kb = (float(k) for k in weights)
    return rgb[..., 0] * kr + rgb[..., 1] * kg + rgb[..., 2] * kb


class FlashMeter:
    """Streaming photosensitive flash meter (see the module docstring for the rules).

    Parameters
    ----------
    fps : float
        Frame rate, frames per second (> 0).
    space : {"ypbpr", "rgb"}
        Signal space of the frames passed to :meth:`push`.
    standard : {"bt601", "bt709", "bt2020"}
        Colour standard for the matrix and luminance weights.
    peak_white_cd_m2, black_cd_m2 : float
        Display assumed by the BT.1886 EOTF.
    grid : (int, int)
        Cells (rows, columns) the screen is cut into for the area rule.
    area_threshold : float
        Share of the screen flashing cells must cover (BT.1702: 25 %).
    warn_area_share : float
        Lower share that already gives ``"warn"`` (our choice).
    step : int
        Use every *step*-th pixel in x and y (1 = all) for the cell means.
    """

    def __init__(self, fps: float, *, space: str = "ypbpr", standard: str = "bt709",
                 peak_white_cd_m2: float = 200.0, black_cd_m2: float = 0.0,
                 grid: tuple[int, int] = (9, 16), area_threshold: float = AREA_THRESHOLD,
                 warn_area_share: float = 0.20, step: int = 2):
        f = float(fps)
        if not (np.isfinite(f) and f > 0):
            raise ConfigError("frame rate must be a positive number", key="fps", value=fps)
        self.fps = f
        self.space = check_space(space)
        self.white_cd_m2, self.black_cd_m2 = _check_display(peak_white_cd_m2, black_cd_m2)
        try:
            gr, gc = (int(g) for g in grid)
        except (TypeError, ValueError):
            raise ConfigError("grid must be (rows, columns)", key="grid", value=grid) from None
        self.grid = (check_positive_int(gr, name="grid[0]"),
                     check_positive_int(gc, name="grid[1]"))
        self.area_threshold = float(area_threshold)
        self.warn_area_share = float(warn_area_share)
        if not 0 < self.area_threshold <= 1 or not 0 < self.warn_area_share <= 1:
            raise ConfigError("area shares must be in (0, 1]", key="area_threshold",
                              value=(area_threshold, warn_area_share))
        self.step = check_positive_int(step, name="step", maximum=64)
        kr, kg, kb = luma_weights(standard)
        self._weights = np.array([kr, kg, kb])
        # normalised R′G′B′ (0…1) = A @ centred volts + d
        if self.space == "ypbpr":
            a = ypbpr_to_rgb_matrix(standard) / Y_SPAN_V
        else:
            a = np.eye(3) / Y_SPAN_V
        self._a = np.ascontiguousarray(a)
        self._d = a @ np.array(centre_offsets_v(self.space))
        grid_v = np.linspace(0.0, 1.0, _LUT_SIZE)
        self._lut = bt1886_eotf(grid_v, white_cd_m2=self.white_cd_m2,
                                black_cd_m2=self.black_cd_m2)
        self.window_frames = max(1, math.ceil(f - 1e-9))
        self.reset()

    # -- state ---------------------------------------------------------------------------
    def reset(self) -> None:
        """Forget all frames seen (keeps the settings; the next frame may have a new size)."""
        n = self.grid[0] * self.grid[1]
        self._shape = None
        self._frames = 0
        self._swing_g = np.zeros((n, 8))
        self._swing_r = np.zeros((n, 8))
        self._ring_g = np.zeros((self.window_frames, n), dtype=np.int32)
        self._ring_r = np.zeros((self.window_frames, n), dtype=np.int32)
        self._win_g = np.zeros(n, dtype=np.int64)
        self._win_r = np.zeros(n, dtype=np.int64)
        self._trans = np.zeros((2, n), dtype=np.int32)
        self._means = []
        self._max = [0, 0, 0.0, 0.0]
        self._first_hazard = None
        self._verdict = 0

    def _layout(self, h: int, w: int) -> None:
        gr, gc = self.grid
        if h < gr or w < gc:
            raise ConfigError(f"frame {w}×{h} is smaller than the flash grid {gc}×{gr}",
                              key="grid", value=self.grid)
        ye = (np.arange(gr + 1) * h) // gr
        xe = (np.arange(gc + 1) * w) // gc
        self._col_cell = np.repeat(np.arange(gc), np.diff(xe)).astype(np.int32)
        self._y_edges = ye.astype(np.int64)
        area = np.outer(np.diff(ye), np.diff(xe)).ravel() / float(h * w)
        self._area = area
        self._sums = np.zeros((gr * gc, 3))
        self._counts = np.zeros(gr * gc, dtype=np.int64)
        self._shape = (h, w)

    # -- per frame -----------------------------------------------------------------------
    def cell_rgb_cd_m2(self, planes) -> np.ndarray:
        """Mean screen luminance of each primary per cell, cd/m², shape (rows·cols, 3).

        Each value is ``EOTF(channel)`` averaged over the cell's (sampled) pixels.
        """
        planes = check_planes(planes)
        h, w = planes.shape[1:]
        if self._shape != (h, w):
            self._layout(h, w)
        kernel = _cell_sums_par if use_threads(3 * (h // self.step) * (w // self.step)) \
            else _cell_sums_ser
        kernel(planes, self._a, self._d, self._lut, self._y_edges, self._col_cell,
               self.grid[1], self.step, self._sums, self._counts)
        return self._sums / np.maximum(self._counts, 1)[:, None]

    def push(self, planes, *, index: int | None = None) -> FlashFrame:
        """Add one frame (planar (3, H, W) centred volts) and return what it changed.

        *index* is the frame's number on the source's own timeline.  Frames left out
        (a preview that dropped them) then still take their place in the one-second window
        — as frames without a transition — so rates are counted per second of the source,
        not per frame received.  Without it, frames are taken as consecutive.
        """
        if index is not None:
            index = int(index)
            gap = index - self._frames
            if self._frames and 0 < gap:
                self._skip(min(gap, self.window_frames))
                self._frames = index
        if self._shape is not None and np.shape(planes)[1:] != self._shape:
            raise ConfigError("frame size changed during a flash measurement; call reset()",
                              key="planes", value=np.shape(planes))
        rgb = self.cell_rgb_cd_m2(planes)
        lum = cell_luminance(rgb, self._weights)
        rel = (rgb - self.black_cd_m2) / (self.white_cd_m2 - self.black_cd_m2)
        rsum = rel.sum(axis=1)
        ratio = np.where(rsum > 0, rel[:, 0] / np.where(rsum > 0, rsum, 1.0), 0.0)
        red = np.maximum(rel[:, 0] - rel[:, 1] - rel[:, 2], 0.0) * RED_SCALE
        first = self._frames == 0
        _update_swings(lum, ratio, self._swing_g, 0, FLASH_DELTA_CD_M2, FLASH_DARK_MAX_CD_M2,
                       first, self._trans[0])
        _update_swings(red, ratio, self._swing_r, 1, RED_DELTA, RED_RATIO_MIN, first,
                       self._trans[1])
        slot = self._frames % self.window_frames
        self._win_g += self._trans[0] - self._ring_g[slot]
        self._win_r += self._trans[1] - self._ring_r[slot]
        self._ring_g[slot] = self._trans[0]
        self._ring_r[slot] = self._trans[1]
        fl_g, area_g = self._screen_count(self._win_g // 2)
        fl_r, area_r = self._screen_count(self._win_r // 2)
        mean = float(lum @ self._area)
        level = self._level(fl_g, fl_r, area_g, area_r)
        t = self._frames / self.fps
        if level == 2 and self._first_hazard is None:
            self._first_hazard = t
        self._verdict = max(self._verdict, level)
        m = self._max
        self._max = [max(m[0], fl_g), max(m[1], fl_r), max(m[2], area_g), max(m[3], area_r)]
        self._means.append(mean)
        frame = FlashFrame(index=self._frames, time_s=t, mean_cd_m2=mean,
                           cells_cd_m2=lum.reshape(self.grid), flashes=fl_g,
                           red_flashes=fl_r, area_over_limit=area_g, red_area_over_limit=area_r,
                           level=_VERDICTS[level])
        self._frames += 1
        return frame

    def _skip(self, n: int) -> None:
        """Advance the one-second window over *n* frames that were not seen."""
        for k in range(n):
            slot = (self._frames + k) % self.window_frames
            self._win_g -= self._ring_g[slot]
            self._win_r -= self._ring_r[slot]
            self._ring_g[slot] = 0
            self._ring_r[slot] = 0

    def _screen_count(self, flashes: np.ndarray) -> tuple[int, float]:
        """(largest k covered by area_threshold of the screen, share of cells over the limit)."""
        order = np.argsort(-flashes, kind="stable")
        cum = np.cumsum(self._area[order])
        i = int(np.searchsorted(cum, self.area_threshold - 1e-12))
        k = int(flashes[order[min(i, order.size - 1)]])
        over = float(self._area[flashes > FLASH_LIMIT_PER_S].sum())
        return k, over

    def _level(self, fl_g, fl_r, area_g, area_r) -> int:
        if max(fl_g, fl_r) > FLASH_LIMIT_PER_S:
            return 2
        if max(fl_g, fl_r) == FLASH_LIMIT_PER_S:
            return 1
        if max(area_g, area_r) >= self.warn_area_share:
            return 1
        return 0

    def report(self) -> FlashReport:
        """Summary of all frames pushed since the start (or the last :meth:`reset`)."""
        m = self._max
        return FlashReport(verdict=_VERDICTS[self._verdict], frames=self._frames, fps=self.fps,
                           max_flashes_per_s=int(m[0]), max_red_flashes_per_s=int(m[1]),
                           max_area_over_limit=float(m[2]), max_red_area_over_limit=float(m[3]),
                           first_hazard_s=self._first_hazard,
                           mean_cd_m2=np.array(self._means))


@numba.njit(cache=True)
def _cell_row(planes, a, d, lut, y_edges, col_cell, ncols, step, sums, counts, gr):
    """Sum EOTF(R′), EOTF(G′), EOTF(B′) (cd/m²) over the sampled pixels of grid row *gr*.

    Normalised R′G′B′ = a @ v + d, clipped to 0…1 (NaN → 0), then the BT.1886
    table with linear interpolation.
    """
    w = planes.shape[2]
    nl = lut.size - 1
    for k in range(gr * ncols, (gr + 1) * ncols):
        sums[k, 0] = 0.0
        sums[k, 1] = 0.0
        sums[k, 2] = 0.0
        counts[k] = 0
    for y in range(y_edges[gr], y_edges[gr + 1], step):
        for x in range(0, w, step):
            v0 = np.float64(planes[0, y, x])
            v1 = np.float64(planes[1, y, x])
            v2 = np.float64(planes[2, y, x])
            k = gr * ncols + col_cell[x]
            for c in range(3):
                e = a[c, 0] * v0 + a[c, 1] * v1 + a[c, 2] * v2 + d[c]
                if not e > 0.0:  # also NaN → black
                    e = 0.0
                elif e > 1.0:
                    e = 1.0
                f = e * nl
                i = min(int(f), nl - 1)
                sums[k, c] += lut[i] + (f - i) * (lut[i + 1] - lut[i])
            counts[k] += 1


@numba.njit(cache=True, parallel=True)
def _cell_sums_par(planes, a, d, lut, y_edges, col_cell, ncols, step, sums, counts):
    """Grid rows spread over the threads; each writes only its own cells."""
    for gr in prange(y_edges.size - 1):
        _cell_row(planes, a, d, lut, y_edges, col_cell, ncols, step, sums, counts, gr)


@numba.njit(cache=True)
def _cell_sums_ser(planes, a, d, lut, y_edges, col_cell, ncols, step, sums, counts):
    """All grid rows on the calling thread (small frames)."""
    for gr in range(y_edges.size - 1):
        _cell_row(planes, a, d, lut, y_edges, col_cell, ncols, step, sums, counts, gr)


@numba.njit(cache=True)
def _update_swings(values, ratio, st, mode, delta, limit, first, trans):
    """Advance each cell's swing by one frame; trans[k] = 1 where a transition counts.

    State per cell (st[k]): 0 direction (0 none yet, +1 rising, −1 falling),
    1 start level, 2 start ratio, 3 extreme level, 4 extreme ratio, 5 counted,
    6 running low (direction 0), 7 running high (direction 0), with the
    ratios of those two kept in 2 and 4 while the direction is 0.
    mode 0 (general): a swing counts when |extreme − start| >= delta and the
    darker end < limit.  mode 1 (red): when |extreme − start| > delta and
    either end has ratio >= limit.
    """
    for k in range(values.size):
        v = values[k]
        q = ratio[k]
        s = st[k]
        trans[k] = 0
        if first:
            s[0] = 0.0
            s[6] = v
            s[7] = v
            s[2] = q
            s[4] = q
            continue
        if s[0] == 0.0:
            if v < s[6]:
                s[6] = v
                s[2] = q
            if v > s[7]:
                s[7] = v
                s[4] = q
            span = s[7] - s[6]
            if (mode == 0 and span >= delta) or (mode == 1 and span > delta):
                if v == s[7]:  # just rose: swing from the low to here
                    s[0] = 1.0
                    s[1] = s[6]
                    s[3] = s[7]
                else:
                    s[0] = -1.0
                    s[1] = s[7]
                    s[3] = s[6]
                    lo_q = s[2]
                    s[2] = s[4]
                    s[4] = lo_q
                s[5] = 0.0
            else:
                continue
        else:
            d = s[0]
            if (v - s[3]) * d > 0.0:  # keeps going the same way
                s[3] = v
                s[4] = q
            else:
                back = (s[3] - v) * d
                if (mode == 0 and back >= delta) or (mode == 1 and back > delta):
                    s[0] = -d
                    s[1] = s[3]
                    s[2] = s[4]
                    s[3] = v
                    s[4] = q
                    s[5] = 0.0
        if s[5] == 0.0:
            size = abs(s[3] - s[1])
            if mode == 0:
                ok = size >= delta and min(s[1], s[3]) < limit
            else:
                ok = size > delta and (s[2] >= limit or s[4] >= limit)
            if ok:
                s[5] = 1.0
                trans[k] = 1
