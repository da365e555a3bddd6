"""Drawing the monitors' numbers as BGR uint8 panels (OpenCV), and tiling them.

The numbers come from :mod:`~livecurve.monitors.waveform`,
:mod:`~livecurve.monitors.vectorscope`, :mod:`~livecurve.monitors.transfer`
and :mod:`~livecurve.monitors.alarms`; nothing here measures the picture
again.  Every function takes an optional ``out`` buffer so a preview loop can
reuse its memory frame after frame.  Colours, marks and layout are livecurve's
own.

Brightness of a histogram cell
    ``min(1, sqrt(mean_count / ref))`` blended from the background to the
    trace colour, where ``mean_count`` is the cell's count averaged over the
    histogram cells that fall on one panel pixel and ``ref`` is a reference
    count (for the waveform: 1/24 of a picture column's samples).
"""

from __future__ import annotations

import math

import cv2
import numba
import numpy as np
from numba import prange

from livecurve.errors import ConfigError
from livecurve.monitors.alarms import MASK_CLIPPED, MASK_OUTSIDE_LEGAL, LevelAlarms
from livecurve.monitors.planes import check_out, check_positive_int, use_threads
from livecurve.monitors.transfer import TransferView
from livecurve.monitors.vectorscope import BAR_RGB, SKIN_LINE_ANGLE_DEG, bar_targets
from livecurve.monitors.waveform import GRATICULE_MV, level_to_row
from livecurve.signal.component import C_PEAK_V, channel_names, check_space

# livecurve's palette (BGR)
BACKGROUND = (24, 20, 17)
GRID = (92, 86, 80)
GRID_DIM = (58, 54, 50)
TEXT = (205, 205, 195)
TRACE_YPBPR = ((150, 222, 250), (240, 172, 84), (112, 122, 250))
TRACE_RGB = ((92, 92, 240), (112, 222, 112), (240, 142, 84))
SCOPE_TRACE = (182, 236, 206)
SKIN_LINE = (140, 182, 214)
ZEBRA = {MASK_OUTSIDE_LEGAL: (0, 200, 255), MASK_CLIPPED: (190, 64, 255)}
ALARM_HOT = (70, 90, 245)

_FONT = cv2.FONT_HERSHEY_SIMPLEX
_LAYOUTS = ("side_by_side", "single")


def _trace_colours(space: str):
    return TRACE_YPBPR if check_space(space) == "ypbpr" else TRACE_RGB


def _check_size(size, name: str) -> tuple[int, int]:
    try:
        h, w = (int(s) for s in size)
    except (TypeError, ValueError):
        raise ConfigError("size must be (height, width) in pixels", key=name,
                          value=size) from None
    return (check_positive_int(h, name=f"{name}[0]", minimum=16, maximum=8192),
            check_positive_int(w, name=f"{name}[1]", minimum=16, maximum=8192))


def _label(img, text: str, org, *, scale: float = 0.4, colour=TEXT) -> None:
    # OpenCV's Hershey fonts are ASCII only: write the prime of Y′, R′… as an apostrophe
    text = text.replace("′", "'")
    cv2.putText(img, text, (int(org[0]), int(org[1])), _FONT, scale, colour, 1, cv2.LINE_AA)


@numba.njit(cache=True)
def _paint_row(counts, ref, bg, colour, dst, y):
    """dst[y, x] = blend(bg → colour, min(1, sqrt(mean count of the source block / ref)))."""
    rows, cols = counts.shape
    h, w = dst.shape[0], dst.shape[1]
    r0 = y * rows // h
    r1 = max(r0 + 1, (y + 1) * rows // h)
    for x in range(w):
        c0 = x * cols // w
        c1 = max(c0 + 1, (x + 1) * cols // w)
        acc = 0.0
        for r in range(r0, r1):
            for c in range(c0, c1):
                acc += counts[r, c]
        k = math.sqrt(acc / ((r1 - r0) * (c1 - c0) * ref))
        if k > 1.0:
            k = 1.0
        for ch in range(3):
            dst[y, x, ch] = np.uint8(bg[ch] + k * (colour[ch] - bg[ch]) + 0.5)


@numba.njit(cache=True, parallel=True)
def _paint_par(counts, ref, bg, colour, dst):
    for y in prange(dst.shape[0]):
        _paint_row(counts, ref, bg, colour, dst, y)


@numba.njit(cache=True)
def _paint_ser(counts, ref, bg, colour, dst):
    for y in range(dst.shape[0]):
        _paint_row(counts, ref, bg, colour, dst, y)


def _paint(counts, ref, colour, dst) -> None:
    kernel = _paint_par if use_threads(counts.size + dst.size) else _paint_ser
    kernel(np.ascontiguousarray(counts), float(max(ref, 1e-9)),
                np.array(BACKGROUND, dtype=np.float64), np.array(colour, dtype=np.float64), dst)


def draw_waveform(counts, *, space: str, lo_mv: float = -50.0, hi_mv: float = 750.0,
                  layout: str = "side_by_side", channel: int = 0, size=(256, 768),
                  out=None) -> np.ndarray:
    """Draw waveform counts (see :func:`~livecurve.monitors.waveform.waveform`).

    Parameters
    ----------
    counts : ndarray of uint32, shape (3, rows, cols)
    space : {"ypbpr", "rgb"}
    lo_mv, hi_mv : float
        The range the counts were made with.
    layout : {"side_by_side", "single"}
        The three channels next to each other, or one channel (*channel*) alone.
    size : (int, int)
        Panel height and width, pixels.
    out : ndarray of uint8, shape (height, width, 3), optional

    Returns
    -------
    ndarray of uint8, shape (height, width, 3), BGR
    """
    counts = np.asarray(counts)
    if counts.ndim != 3 or counts.shape[0] != 3:
        raise ConfigError("expected waveform counts of shape (3, rows, cols)", key="counts",
                          value=counts.shape)
    if layout not in _LAYOUTS:
        raise ConfigError(f"unknown layout; accepted: {', '.join(_LAYOUTS)}", key="layout",
                          value=layout)
    space = check_space(space)
    h, w = _check_size(size, "size")
    img = check_out(out, (h, w, 3), np.uint8)
    cv2.rectangle(img, (0, 0), (img.shape[1], img.shape[0]), BACKGROUND, -1)  # fast fill
    rows = counts.shape[1]
    shown = (0, 1, 2) if layout == "side_by_side" else (int(channel),)
    if any(c not in (0, 1, 2) for c in shown):
        raise ConfigError("channel must be 0, 1 or 2", key="channel", value=channel)
    gap = 6 if len(shown) > 1 else 0
    margin_l, margin_t = 34, 14
    sec_w = (w - margin_l - gap * (len(shown) - 1)) // len(shown)
    plot_h = h - margin_t
    if sec_w < 8 or plot_h < 8:
        raise ConfigError("panel too small for this layout", key="size", value=size)
    names = channel_names(space)
    colours = _trace_colours(space)
    # graticule rows in panel pixels (top edge of the level's histogram row)
    def ypix(mv):
        return margin_t + int(level_to_row(mv, rows=rows, lo_mv=lo_mv, hi_mv=hi_mv)
                              * plot_h / rows)
    for i, c in enumerate(shown):
        x0 = margin_l + i * (sec_w + gap)
        col = counts[c]
        ref = max(col.sum() / max(col.shape[1], 1) / 24.0, 1.0)
        _paint(col, ref, colours[c], img[margin_t:, x0:x0 + sec_w])
        for mv in GRATICULE_MV:
            y = ypix(mv)
            cv2.line(img, (x0, y), (x0 + sec_w - 1, y), GRID, 1)
        if space == "ypbpr" and c > 0:  # zero of the shifted Pb/Pr trace
            y = ypix(C_PEAK_V * 1000.0)
            for xs in range(x0, x0 + sec_w, 8):
                cv2.line(img, (xs, y), (min(xs + 3, x0 + sec_w - 1), y), GRID_DIM, 1)
        _label(img, names[c], (x0 + 3, margin_t - 3), colour=colours[c])
    for mv in GRATICULE_MV:
        _label(img, f"{int(mv)}", (2, ypix(mv) + 4), scale=0.33)
    _label(img, "mV", (2, margin_t - 3), scale=0.33)
    return img


def draw_vectorscope(hist, *, standard: str, span_mv: float = 400.0,
                     amplitudes=(0.75, 1.0), size: int = 320, out=None) -> np.ndarray:
    """Draw a vectorscope histogram with bar-target marks and the skin-tone line.

    Parameters
    ----------
    hist : ndarray of uint32, shape (n, n)
        From :func:`~livecurve.monitors.vectorscope.vectorscope` with the same *span_mv*.
    standard : {"bt601", "bt709", "bt2020"}
        For the bar targets.
    amplitudes : sequence of float
        Bar amplitudes to mark (75 % bars get a small mark, others a smaller dot).
    size : int
        Panel side, pixels.

    Returns
    -------
    ndarray of uint8, shape (size, size, 3), BGR
    """
    hist = np.asarray(hist)
    if hist.ndim != 2 or hist.shape[0] != hist.shape[1]:
        raise ConfigError("expected a square vectorscope histogram", key="hist",
                          value=hist.shape)
    size = check_positive_int(size, name="size", minimum=32, maximum=8192)
    img = check_out(out, (size, size, 3), np.uint8)
    n = hist.shape[0]
    total = float(hist.sum())
    ref = max(total / (n * n) * 4.0, 1.0)
    _paint(hist, ref, SCOPE_TRACE, img)
    half = size / 2.0
    px_per_mv = size / (2.0 * float(span_mv))

    def to_px(pb_v, pr_v):
        return (int(round(half + pb_v * 1000.0 * px_per_mv)),
                int(round(half - pr_v * 1000.0 * px_per_mv)))

    centre = (int(round(half)), int(round(half)))
    cv2.line(img, (0, centre[1]), (size - 1, centre[1]), GRID_DIM, 1)
    cv2.line(img, (centre[0], 0), (centre[0], size - 1), GRID_DIM, 1)
    cv2.circle(img, centre, int(round(C_PEAK_V * 1000.0 * px_per_mv)), GRID, 1, cv2.LINE_AA)
    # skin-tone line, dashed, from the centre to the nominal circle
    a = math.radians(SKIN_LINE_ANGLE_DEG)
    r_max = C_PEAK_V * 1000.0 * px_per_mv
    for t0 in np.arange(0.0, 1.0, 0.08):
        p0 = (int(centre[0] + math.cos(a) * r_max * t0), int(centre[1] - math.sin(a) * r_max * t0))
        t1 = min(t0 + 0.05, 1.0)
        p1 = (int(centre[0] + math.cos(a) * r_max * t1), int(centre[1] - math.sin(a) * r_max * t1))
        cv2.line(img, p0, p1, SKIN_LINE, 1, cv2.LINE_AA)
    for amp in amplitudes:
        for name, (pb, pr) in bar_targets(standard, amp).items():
            r, g, b = BAR_RGB[name]
            colour = (int(60 + 190 * b), int(60 + 190 * g), int(60 + 190 * r))
            x, y = to_px(pb, pr)
            if math.isclose(float(amp), 0.75):
                d = max(3, size // 80)
                pts = np.array([[x, y - d], [x + d, y], [x, y + d], [x - d, y]], np.int32)
                cv2.polylines(img, [pts], True, colour, 1, cv2.LINE_AA)
            else:
                cv2.circle(img, (x, y), max(1, size // 160), colour, -1, cv2.LINE_AA)
    _label(img, "Pb", (size - 22, centre[1] - 4), scale=0.35)
    _label(img, "Pr", (centre[0] + 4, 12), scale=0.35)
    return img


def draw_transfer(view: TransferView, *, channels=(0, 1, 2), space: str = "ypbpr",
                  size=(256, 320), out=None) -> np.ndarray:
    """Draw the present transfer curves with the frame's input histogram beneath them.

    The x axis is the curve's input (volts), the y axis its output; the band of
    input the picture uses in the first listed channel is shaded, and the
    histogram of input samples of every listed channel is drawn as a strip
    along the bottom.

    Parameters
    ----------
    view : TransferView
    channels : sequence of int
        Channels to draw (0, 1, 2).
    space : {"ypbpr", "rgb"}
        For channel names and colours.
    size : (int, int)
        Panel height and width, pixels.
    out : ndarray of uint8, shape (height, width, 3), optional

    Returns
    -------
    ndarray of uint8, shape (height, width, 3), BGR
    """
    if not isinstance(view, TransferView):
        raise ConfigError("expected a TransferView", key="view", value=type(view).__name__)
    h, w = _check_size(size, "size")
    img = check_out(out, (h, w, 3), np.uint8)
    cv2.rectangle(img, (0, 0), (img.shape[1], img.shape[0]), BACKGROUND, -1)  # fast fill
    colours = _trace_colours(space)
    names = channel_names(space)
    ml, mr, mt, strip = 40, 6, 14, max(16, h // 6)
    plot = (ml, mt, w - mr, h - strip - 14)  # x0, y0, x1, y1
    if plot[2] - plot[0] < 16 or plot[3] - plot[1] < 16:
        raise ConfigError("panel too small for the transfer view", key="size", value=size)
    xin = view.curve_in_v
    chans = tuple(int(c) for c in channels)
    if not chans or any(c not in (0, 1, 2) for c in chans):
        raise ConfigError("channels must be a non-empty sequence of 0, 1, 2", key="channels",
                          value=channels)
    yout = view.curve_out_v[list(chans)]
    lo_y, hi_y = float(np.nanmin(yout)), float(np.nanmax(yout))
    if not hi_y > lo_y:
        lo_y, hi_y = lo_y - 0.05, hi_y + 0.05
    pad = 0.05 * (hi_y - lo_y)
    lo_y, hi_y = lo_y - pad, hi_y + pad

    def px(xv, yv):
        fx = (np.asarray(xv) - xin[0]) / (xin[-1] - xin[0])
        fy = (np.asarray(yv) - lo_y) / (hi_y - lo_y)
        return (plot[0] + fx * (plot[2] - plot[0] - 1), plot[3] - 1 - fy * (plot[3] - plot[1] - 1))

    span = view.used_span_v()
    for c in chans:
        if np.all(np.isfinite(span[c])):
            xa, _ = px(span[c, 0], lo_y)
            xb, _ = px(span[c, 1], lo_y)
            cv2.rectangle(img, (int(xa), plot[1]), (int(xb), plot[3] - 1), GRID_DIM, -1)
            break
    cv2.rectangle(img, (plot[0], plot[1]), (plot[2] - 1, plot[3] - 1), GRID, 1)
    if lo_y < 0 < hi_y:
        _, y0 = px(xin[0], 0.0)
        cv2.line(img, (plot[0], int(y0)), (plot[2] - 1, int(y0)), GRID_DIM, 1)
    for c in chans:
        xs, ys = px(xin, view.curve_out_v[c])
        ok = np.isfinite(ys)
        pts = np.stack([xs[ok], ys[ok]], axis=1).round().astype(np.int32)
        if len(pts) > 1:
            cv2.polylines(img, [pts], False, colours[c], 1, cv2.LINE_AA)
    # histogram strip
    sy0, sy1 = h - strip, h - 2
    peak = max(int(view.counts[list(chans)].max()), 1)
    nb = view.bins
    for c in chans:
        hist = view.counts[c]
        for k in np.flatnonzero(hist):
            xa = int(plot[0] + k * (plot[2] - plot[0]) / nb)
            xb = int(plot[0] + (k + 1) * (plot[2] - plot[0]) / nb)
            top = int(sy1 - math.sqrt(hist[k] / peak) * (sy1 - sy0))
            cv2.line(img, (xa, top), (max(xa, xb - 1), top), colours[c], 1)
            cv2.line(img, (xa, sy1), (xa, top), colours[c], 1)
    _label(img, f"{xin[0] * 1000:.0f}", (plot[0], plot[3] + 11), scale=0.32)
    _label(img, f"{xin[-1] * 1000:.0f} mV in", (plot[2] - 70, plot[3] + 11), scale=0.32)
    _label(img, f"{hi_y * 1000:.0f}", (2, plot[1] + 8), scale=0.32)
    _label(img, f"{lo_y * 1000:.0f}", (2, plot[3] - 2), scale=0.32)
    _label(img, " ".join(names[c] for c in chans), (ml, mt - 3), scale=0.36)
    return img


def draw_alarms(alarms: LevelAlarms, *, size=(120, 320), out=None) -> np.ndarray:
    """Draw the alarm numbers: per channel, % outside legal (low/high) and % clipped.

    Returns
    -------
    ndarray of uint8, shape (height, width, 3), BGR
    """
    if not isinstance(alarms, LevelAlarms):
        raise ConfigError("expected LevelAlarms", key="alarms", value=type(alarms).__name__)
    h, w = _check_size(size, "size")
    img = check_out(out, (h, w, 3), np.uint8)
    cv2.rectangle(img, (0, 0), (img.shape[1], img.shape[0]), BACKGROUND, -1)  # fast fill
    n = max(alarms.total, 1)
    line = max(14, (h - 8) // 5)
    cols = (6, int(w * 0.22), int(w * 0.47), int(w * 0.72))
    y = line
    for x, head in zip(cols, ("", "legal lo/hi %", "clip lo/hi %", "bad"), strict=True):
        _label(img, head, (x, y), scale=0.36, colour=GRID)
    for c in range(3):
        y += line
        vals = ((alarms.below_legal[c], alarms.above_legal[c]),
                (alarms.clipped_low[c], alarms.clipped_high[c]))
        _label(img, alarms.channels[c], (cols[0], y), scale=0.4)
        for x, (a, b) in zip(cols[1:3], vals, strict=True):
            hot = ALARM_HOT if a or b else TEXT
            _label(img, f"{100 * a / n:5.2f} {100 * b / n:5.2f}", (x, y), scale=0.38, colour=hot)
        _label(img, f"{int(alarms.invalid[c])}", (cols[3], y), scale=0.38,
               colour=ALARM_HOT if alarms.invalid[c] else TEXT)
    y += line
    _label(img, f"pixels: {100 * alarms.pixels_outside_legal / n:.2f}% outside legal, "
                f"{100 * alarms.pixels_clipped / n:.2f}% clipped", (cols[0], y), scale=0.34)
    return img


@numba.njit(cache=True)
def _overlay_row(src, mask, lut, dst, y):
    for x in range(mask.shape[1]):
        m = mask[y, x]
        if m != 0:
            for ch in range(3):
                dst[y, x, ch] = lut[m, ch]
        else:
            for ch in range(3):
                dst[y, x, ch] = src[y, x, ch]


@numba.njit(cache=True, parallel=True)
def _overlay_par(src, mask, lut, dst):
    for y in prange(mask.shape[0]):
        _overlay_row(src, mask, lut, dst, y)


@numba.njit(cache=True)
def _overlay_ser(src, mask, lut, dst):
    for y in range(mask.shape[0]):
        _overlay_row(src, mask, lut, dst, y)


def zebra_overlay(bgr, mask, *, colours=None, out=None) -> np.ndarray:
    """Paint the alarm stripes of :func:`~livecurve.monitors.alarms.zebra_mask` over a picture.

    Parameters
    ----------
    bgr : ndarray of uint8, shape (H, W, 3)
    mask : ndarray of uint8, shape (H, W)
        Alarm codes (0 none, 1 outside legal, 2 clipped).
    colours : dict, optional
        Code → BGR colour; default livecurve's :data:`ZEBRA`.
    out : ndarray of uint8, shape (H, W, 3), optional
        May be *bgr* itself to paint in place.

    Returns
    -------
    ndarray of uint8, shape (H, W, 3)
    """
    bgr = np.asarray(bgr)
    mask = np.asarray(mask)
    if bgr.ndim != 3 or bgr.shape[2] != 3 or bgr.dtype != np.uint8:
        raise ConfigError("expected a BGR uint8 picture of shape (H, W, 3)", key="bgr",
                          value=(bgr.shape, str(bgr.dtype)))
    if mask.shape != bgr.shape[:2] or mask.dtype != np.uint8:
        raise ConfigError(f"mask must be uint8 of shape {bgr.shape[:2]}", key="mask",
                          value=(mask.shape, str(mask.dtype)))
    lut = np.zeros((256, 3), dtype=np.uint8)
    for code, colour in (colours or ZEBRA).items():
        lut[int(code)] = colour
    dst = check_out(out, bgr.shape, np.uint8)
    kernel = _overlay_par if use_threads(mask.size) else _overlay_ser
    kernel(np.ascontiguousarray(bgr), np.ascontiguousarray(mask), lut, dst)
    return dst


def compose(panels, *, columns: int = 2, tile_size=(270, 480), gap: int = 4,
            labels: bool = True, smooth: bool = True, out=None) -> np.ndarray:
    """Tile the picture and chosen monitor panels into one BGR image.

    Parameters
    ----------
    panels : sequence of (str, ndarray) or dict
        Label and BGR uint8 image (H, W, 3) of each tile, in reading order.
        Each is scaled to fit its tile with its aspect ratio kept.
    columns : int
        Tiles per row.
    tile_size : (int, int)
        Height and width of one tile, pixels.
    gap : int
        Pixels between tiles.
    labels : bool
        Write each label in the tile's top-left corner.
    smooth : bool
        Shrink panels with area averaging (no aliasing); False uses bilinear
        sampling, about 5× cheaper for a 1080p picture, at the price of
        aliasing on fine detail.
    out : ndarray of uint8, optional
        Buffer of the resulting shape to reuse.

    Returns
    -------
    ndarray of uint8, shape (rows·th + (rows−1)·gap, columns·tw + (columns−1)·gap, 3)
    """
    items = list(panels.items()) if isinstance(panels, dict) else list(panels)
    if not items:
        raise ConfigError("nothing to compose", key="panels", value=panels)
    columns = check_positive_int(columns, name="columns", maximum=16)
    th, tw = _check_size(tile_size, "tile_size")
    gap = check_positive_int(gap, name="gap", minimum=0, maximum=256)
    nrows = -(-len(items) // columns)
    H = nrows * th + (nrows - 1) * gap
    W = columns * tw + (columns - 1) * gap
    img = check_out(out, (H, W, 3), np.uint8)
    img.fill(8)
    for i, item in enumerate(items):
        try:
            name, panel = item
        except (TypeError, ValueError):
            raise ConfigError("each panel must be (label, image)", key=f"panels[{i}]",
                              value=type(item).__name__) from None
        panel = np.asarray(panel)
        if panel.ndim != 3 or panel.shape[2] != 3 or panel.dtype != np.uint8:
            raise ConfigError("panel must be BGR uint8 of shape (H, W, 3)", key=f"panels[{i}]",
                              value=(panel.shape, str(panel.dtype)))
        r, c = divmod(i, columns)
        y0, x0 = r * (th + gap), c * (tw + gap)
        ph, pw = panel.shape[:2]
        k = min(th / ph, tw / pw)
        nh, nw = max(1, int(ph * k)), max(1, int(pw * k))
        oy, ox = y0 + (th - nh) // 2, x0 + (tw - nw) // 2
        if (nh, nw) == (ph, pw):
            img[oy:oy + nh, ox:ox + nw] = panel
        else:
            interp = cv2.INTER_AREA if (k < 1 and smooth) else cv2.INTER_LINEAR
            img[oy:oy + nh, ox:ox + nw] = cv2.resize(panel, (nw, nh), interpolation=interp)
        if labels and name:
            _label(img, str(name), (x0 + 5, y0 + 14), scale=0.42)
    return img
