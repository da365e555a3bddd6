"""Plain line plots drawn with OpenCV (no plotting library needed): curves over a
grid with axis labels.  Colours and layout are our own."""

from __future__ import annotations

import cv2
import numpy as np

#: Trace colours (BGR) for channels 0, 1, 2 and extra series.
TRACE_BGR = [(60, 200, 250), (230, 160, 60), (120, 90, 240), (140, 220, 140), (200, 200, 200)]
BG_BGR = (28, 24, 22)
GRID_BGR = (70, 64, 58)
TEXT_BGR = (225, 225, 225)


def _nice_ticks(lo: float, hi: float, n: int = 6) -> np.ndarray:
    span = hi - lo
    if span <= 0:
        return np.array([lo])
    raw = span / n
    mag = 10 ** np.floor(np.log10(raw))
    step = min((m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw), default=raw)
    return np.arange(np.ceil(lo / step) * step, hi + 1e-12, step)


def line_plot(x: np.ndarray, ys, *, labels=(), title: str = "", xlabel: str = "",
              ylabel: str = "", size=(960, 600), xlim=None, ylim=None, colours=None,
              thickness: int = 2) -> np.ndarray:
    """Draw series *ys* (list of arrays like *x*) against *x*; returns a BGR uint8 image.

    *colours* (BGR per series) defaults to the channel trace colours."""
    w, h = size
    img = np.full((h, w, 3), BG_BGR, dtype=np.uint8)
    small = w < 640
    left, right, top, bottom = (64, 12, 30, 42) if small else (80, 20, 40, 50)
    colours = colours or [TRACE_BGR[i % len(TRACE_BGR)] for i in range(len(ys))]
    pw, ph = w - left - right, h - top - bottom
    x = np.asarray(x, dtype=np.float64)
    ys = [np.asarray(y, dtype=np.float64) for y in ys]
    x0, x1 = xlim if xlim else (float(x.min()), float(x.max()))
    finite = np.concatenate([y[np.isfinite(y)] for y in ys]) if ys else np.zeros(1)
    y0, y1 = ylim if ylim else (float(finite.min()), float(finite.max()))
    if y1 - y0 < 1e-9:
        y0, y1 = y0 - 0.5, y1 + 0.5
    pad = 0.05 * (y1 - y0)
    y0, y1 = (y0, y1) if ylim else (y0 - pad, y1 + pad)

    def px(xv, yv):
        u = left + (np.asarray(xv) - x0) / (x1 - x0) * pw
        v = top + (1 - (np.asarray(yv) - y0) / (y1 - y0)) * ph
        return u, v

    font = cv2.FONT_HERSHEY_SIMPLEX
    for t in _nice_ticks(x0, x1):
        u, _ = px(t, y0)
        cv2.line(img, (int(u), top), (int(u), top + ph), GRID_BGR, 1)
        cv2.putText(img, f"{t:g}", (int(u) - 15, h - bottom + 18), font, 0.4, TEXT_BGR, 1,
                    cv2.LINE_AA)
    for t in _nice_ticks(y0, y1):
        _, v = px(x0, t)
        cv2.line(img, (left, int(v)), (left + pw, int(v)), GRID_BGR, 1)
        cv2.putText(img, f"{t:.4g}", (5, int(v) + 4), font, 0.4, TEXT_BGR, 1, cv2.LINE_AA)
    cv2.rectangle(img, (left, top), (left + pw, top + ph), (110, 104, 98), 1)
    for i, y in enumerate(ys):
        ok = np.isfinite(y)
        u, v = px(x[ok], np.clip(y[ok], y0 - 10 * (y1 - y0), y1 + 10 * (y1 - y0)))
        pts = np.stack([u, v], axis=1).round().astype(np.int32)
        cv2.polylines(img, [pts], False, colours[i], thickness, cv2.LINE_AA)
        if i < len(labels):
            cv2.putText(img, labels[i], (left + 10 + 150 * i, top - 10), font, 0.5,
                        colours[i], 1, cv2.LINE_AA)
    cv2.putText(img, title, (left, 18), font, 0.55, TEXT_BGR, 1, cv2.LINE_AA)
    cv2.putText(img, xlabel, (left + pw // 2 - 40, h - 12), font, 0.45, TEXT_BGR, 1, cv2.LINE_AA)
    cv2.putText(img, ylabel, (5, top - 22), font, 0.45, TEXT_BGR, 1, cv2.LINE_AA)
    return img


def write_png(path, img: np.ndarray, *, force: bool = True) -> None:
    """Write a BGR image as PNG, all-or-nothing."""
    from livecurve.media.atomic import atomic_output
    with atomic_output(path, force=force) as tmp:
        if not cv2.imwrite(str(tmp), img):
            raise OSError("PNG encoder failed")
