"""The preview composite: picture, monitors and a status panel in one BGR image.

The live window and the headless snapshot draw exactly this image, so a snapshot shows
what the window showed.  Numbers first, drawing second: the monitors' numbers come from
:mod:`livecurve.monitors` (waveform, vectorscope, transfer view, level alarms, zebra
mask) and are drawn with :mod:`livecurve.monitors.draw`; the layout, status panel and
help list are livecurve's own.

Layout (pixels, fixed so the window never changes size)::

    +------------------------------+---------+
    |                              | slot 0  |
    |  picture  (PIC_H × PIC_W)    +---------+
    |                              | slot 1  |
    +---------+---------+----------+---------+
    | slot 2  | slot 3  | slot 4   |
    +---------+---------+----------+

The shown monitors fill the slots in the order of :data:`MONITORS`, followed by the
status panel; unused slots stay dark.

Scope sampling
    The waveform, vectorscope and the transfer view's input histogram read every
    ``scope_step``-th line and every ``scope_step``-th sample of a line: by default 1
    up to 1280 × 720 and 2 above (a 1080-line picture is read as 540 lines of 960
    samples, a quarter of the work; a detail one sample wide can then be missed).  The
    level alarms and the zebra stripes always count every sample: their numbers are exact.
    The snapshot uses the same rule, so it shows what the window shows.

Transfer view curve
    The chain's present DC transfer per channel, read from the engine's own tables
    (the line filters of dynamic stages have unity gain at DC, so they do not change
    it), at the frame's mean control value for a modulated parameter.  In exact mode
    (no tables) the DC solver gives the curve instead.
"""

from __future__ import annotations

import math
import time
from collections import deque
from dataclasses import dataclass, field

import cv2
import numpy as np

from livecurve.engine.tables import apply_table
from livecurve.monitors import draw
from livecurve.monitors.alarms import level_alarms, zebra_mask
from livecurve.monitors.transfer import transfer_view
from livecurve.monitors.vectorscope import vectorscope
from livecurve.monitors.waveform import waveform
from livecurve.signal.levels import converter_limits_v
from livecurve.units import format_value

#: Monitors the preview can show, in slot order.
MONITORS = ("waveform", "vectorscope", "transfer", "alarms")

TILE_H, TILE_W = 270, 480
GAP = 4
PIC_H, PIC_W = 2 * TILE_H + GAP, 2 * TILE_W + GAP
CANVAS_H, CANVAS_W = PIC_H + GAP + TILE_H, PIC_W + GAP + TILE_W
#: Points of the transfer view's curve along the chain's sweep range.
CURVE_POINTS = 256
#: Pictures with more samples than this are read by the scopes at every 2nd line and sample.
SCOPE_FULL_MAX_SAMPLES = 1280 * 720
#: Monitor redraws a second at most: a clip faster than this redraws its monitors on every
#: n-th frame shown (n = round(fps / MONITOR_MAX_HZ)), the picture on every frame.
MONITOR_MAX_HZ = 30.0
#: Frames of control history drawn as the control trace.
TRACE_FRAMES = 150

# livecurve's own status colours (BGR)
_PANEL_BG = (24, 20, 17)
_TEXT = (205, 205, 195)
_DIM = (130, 126, 120)
_HOT = (70, 90, 245)
_ACCENT = (90, 200, 240)
_TRACE = (120, 220, 160)
_FONT = cv2.FONT_HERSHEY_SIMPLEX
# tile labels written by the layout (the waveform and transfer panels label themselves)
_TILE_LABELS = {"waveform": "", "vectorscope": "vectorscope", "transfer": "",
                "alarms": "level alarms"}


def check_monitors(names) -> tuple[str, ...]:
    """Validate a selection of monitors (None = all) and put it in slot order."""
    from livecurve.errors import ConfigError
    if names is None:
        return MONITORS
    if isinstance(names, str):
        names = [n for n in names.replace(",", " ").split() if n]
    chosen = set()
    for n in names:
        if n not in MONITORS:
            raise ConfigError(f"unknown monitor; accepted: {', '.join(MONITORS)}",
                              key="--monitors", value=n)
        chosen.add(n)
    return tuple(m for m in MONITORS if m in chosen)


@dataclass
class ViewState:
    """What the window shows: monitors, zebra, split view and help list."""

    monitors: tuple = MONITORS
    zebra: bool = False
    split: bool = False
    help: bool = False

    def toggle_monitor(self, name: str) -> None:
        on = set(self.monitors) ^ {name}
        self.monitors = tuple(m for m in MONITORS if m in on)


@dataclass
class Knob:
    """A live parameter as the status panel shows it."""

    name: str
    value: float
    unit: str
    lo: float
    hi: float
    driven_by: str | None = None


@dataclass
class Status:
    """Text of the status panel and flags drawn over the picture."""

    title: str = ""
    source: str = ""
    frame: int = 0
    time_s: float = 0.0
    fps_shown: float = 0.0
    fps_target: float = 0.0
    dropped: int = 0
    paused: bool = False
    ended: bool = False
    loop: bool = True
    bypass: bool = False
    knobs: list = field(default_factory=list)
    selected: int = 0
    rebuilding: bool = False
    table_bound_v: float = 0.0
    note: str = ""
    error: str = ""


def _text(img, s: str, x: int, y: int, *, scale: float = 0.42, colour=_TEXT,
          thick: int = 1) -> None:
    cv2.putText(img, s, (int(x), int(y)), _FONT, scale, colour, thick, cv2.LINE_AA)


def _fmt(value: float, unit: str) -> str:
    """A knob value: engineering prefix with a unit, plain digits without one."""
    return format_value(value, unit) if unit else f"{value:.4g}"


def _wrap(s: str, width: int) -> list[str]:
    words, lines, cur = s.split(), [], ""
    for w in words:
        if cur and len(cur) + 1 + len(w) > width:
            lines.append(cur)
            cur = w
        else:
            cur = f"{cur} {w}".strip()
    if cur:
        lines.append(cur)
    return lines


def picture_scale(height: int, width: int) -> tuple[float, int]:
    """Scale and OpenCV interpolation that fit a picture into the picture area.

    A scale just below the fit that is a whole fraction 1/n (1080 lines → 1/2) is taken
    with area averaging, which OpenCV does quickly for whole fractions; any other
    reduction uses bilinear interpolation (area averaging at an odd ratio costs ~10× more
    here), and enlargements bilinear as well.
    """
    k = min(PIC_H / height, PIC_W / width)
    if k >= 1:
        return k, cv2.INTER_LINEAR
    n = math.ceil(1 / k - 1e-9)
    if 1 / n >= 0.98 * k:
        return 1 / n, cv2.INTER_AREA
    return k, cv2.INTER_LINEAR


def dc_curves(engine, vin_v: np.ndarray, controls: dict | None = None) -> np.ndarray:
    """The chain's present DC transfer of every channel (see the module docstring).

    Parameters
    ----------
    engine : FrameEngine
    vin_v : ndarray, shape (N,)
        Input volts (zero-centred channel volts).
    controls : dict, optional
        Modulated parameter name → values used for the last frame; their mean is used.

    Returns
    -------
    ndarray, shape (3, N), float64, volts
    """
    controls = controls or {}
    live = dict(engine.state.live)
    for name, v in controls.items():
        live[name] = float(np.mean(v))
    vin = np.asarray(vin_v, dtype=np.float64)
    if engine.exact:
        return engine.model.transfer_all(vin, t_kelvin=engine.state.t_kelvin, live=live,
                                         temps_k=engine.state.temps_k or None)
    out = np.empty((3, vin.size))
    x0 = np.ascontiguousarray(vin.astype(np.float32)[None, :])
    for ch in range(3):
        x = x0
        for run in engine.runs[ch]:
            ctl = live.get(run.knob) if run.knob else None
            x = apply_table(x, run.table, control=ctl)
        out[ch] = x[0]
    return out


class Composer:
    """Draws the composite; keeps its buffers and a short history of control values.

    Attributes
    ----------
    timings_ms : dict
        Milliseconds the last :meth:`compose` spent per part (``picture``, each monitor,
        ``status``, ``layout``): the benchmark reads these.
    """

    def __init__(self, *, scope_step: int | None = None):
        if scope_step is not None and (isinstance(scope_step, bool) or int(scope_step) < 1):
            from livecurve.errors import ConfigError
            raise ConfigError("must be a whole number of lines, 1 or more", key="scope_step",
                              value=scope_step)
        self.scope_step = scope_step
        self._dec: dict[str, np.ndarray] = {}
        self.canvas = np.zeros((CANVAS_H, CANVAS_W, 3), np.uint8)
        self._tiles = {m: np.zeros((TILE_H, TILE_W, 3), np.uint8) for m in MONITORS}
        self._tiles["status"] = np.zeros((TILE_H, TILE_W, 3), np.uint8)
        self._vscope = np.zeros((TILE_H, TILE_H, 3), np.uint8)
        self._blank = np.full((TILE_H, TILE_W, 3), 8, np.uint8)  # as the canvas
        self._column = np.zeros((PIC_H, TILE_W, 3), np.uint8)
        self._status_bg = np.empty((TILE_H, TILE_W, 3), np.uint8)
        self._status_bg[:] = _PANEL_BG
        self._wave_counts = None
        self._vs_hist = None
        self._drawn_monitors = None   # (monitors on, their tiles) as last drawn
        self._mask = None
        self._own_curve: dict = {}     # transfer curves drawn on the window thread
        self._ahead_curve: dict = {}   # … and made ahead on the decoder thread
        self.traces: dict[str, deque] = {}
        self.timings_ms: dict[str, float] = {}
        self._phase = 0

    # ---- control history ------------------------------------------------------------
    def push_controls(self, controls: dict) -> None:
        """Remember this frame's control values (mean, min, max per bound parameter)."""
        for name, v in controls.items():
            a = np.asarray(v, dtype=np.float64)
            tr = self.traces.setdefault(name, deque(maxlen=TRACE_FRAMES))
            tr.append((float(a.mean()), float(a.min()), float(a.max())))

    # ---- parts ------------------------------------------------------------------------
    def step_for(self, height: int, width: int) -> int:
        """Lines and samples between the ones the scopes read (module docstring)."""
        if self.scope_step is not None:
            return int(self.scope_step)
        return 1 if height * width <= SCOPE_FULL_MAX_SAMPLES else 2

    def _sampled(self, key: str, planes: np.ndarray, step: int) -> np.ndarray:
        """Every *step*-th line and sample of *planes*, in a reused buffer."""
        if step == 1:
            return planes
        view = planes[:, ::step, ::step]
        buf = self._dec.get(key)
        if buf is None or buf.shape != view.shape:
            buf = self._dec[key] = np.empty(view.shape, np.float32)
        np.copyto(buf, view)
        return buf

    def _picture(self, src_rgb, flow, view: ViewState) -> np.ndarray:
        out8 = flow.rgb_out if flow.rgb_out.dtype == np.uint8 else (flow.rgb_out >> 8).astype(
            np.uint8)
        h, w = out8.shape[:2]
        k, interp = picture_scale(h, w)
        nh, nw = max(1, int(h * k)), max(1, int(w * k))
        pic = cv2.resize(out8, (nw, nh), interpolation=interp)
        if view.split:
            src8 = src_rgb if src_rgb.dtype == np.uint8 else (src_rgb >> 8).astype(np.uint8)
            left = cv2.resize(src8, (nw, nh), interpolation=interp)
            pic[:, :nw // 2] = left[:, :nw // 2]
        pic = cv2.cvtColor(pic, cv2.COLOR_RGB2BGR)
        if view.zebra:
            spec = flow.spec
            lim = converter_limits_v(spec.space, converter_bits=spec.converter_bits,
                                     converter_legal=spec.converter_legal)
            self._phase = (self._phase + 1) % 1024
            self._mask = zebra_mask(flow.planes_out, space=spec.space, converter_limits_v=lim,
                                    stripe_px=max(2, round(6 / k)), phase=self._phase,
                                    out=self._mask if self._mask is not None
                                    and self._mask.shape == (h, w) else None)
            small = cv2.resize(self._mask, (nw, nh), interpolation=cv2.INTER_NEAREST)
            if view.split:
                small[:, :nw // 2] = 0
            draw.zebra_overlay(pic, small, out=pic)
        return pic

    def measure(self, flow, planes_out: np.ndarray, monitors, *, planes_in=None,
                controls: dict | None = None) -> dict:
        """The monitors' numbers for one frame's views (as :meth:`FrameFlow.make_views`
        makes them), in new arrays: the window makes them ahead, on the decoder thread, and
        :meth:`compose` draws them (``numbers=``).  Monitors not on are not measured; the
        transfer view needs *planes_in* and the frame's *controls*."""
        spec = flow.spec
        out: dict = {}
        on = set(monitors)
        if "transfer" in on and planes_in is not None:
            step = self.step_for(*planes_in.shape[1:])
            sc_in = planes_in if step == 1 else np.ascontiguousarray(planes_in[:, ::step, ::step])
            vin, curve = self._transfer_curve(flow, controls or {}, self._ahead_curve)
            out["transfer"] = transfer_view(vin, curve, sc_in, bins=128)
        if {"waveform", "vectorscope"} & on:
            step = self.step_for(*planes_out.shape[1:])
            sc = planes_out if step == 1 else np.ascontiguousarray(
                planes_out[:, ::step, ::step])
            if "waveform" in on:
                cols = min(sc.shape[2], 240)
                out["waveform"] = waveform(sc, space=spec.space, rows=256, columns=cols)
            if "vectorscope" in on:
                out["vectorscope"] = vectorscope(sc, space=spec.space, standard=flow.standard)
        if "alarms" in on:
            lim = converter_limits_v(spec.space, converter_bits=spec.converter_bits,
                                     converter_legal=spec.converter_legal)
            out["alarms"] = level_alarms(planes_out, space=spec.space, converter_limits_v=lim)
        return out

    @staticmethod
    def _transfer_curve(flow, controls: dict, cache: dict):
        """(input volts, the chain's DC curves at the frame's mean controls), kept in *cache*
        while the engine and the control means stay the same (one cache per thread)."""
        spec = flow.spec
        key = (spec.sweep_v, tuple(sorted((n, round(float(np.mean(v)), 12))
                                          for n, v in controls.items())))
        if cache.get("engine") is not flow.engine or cache.get("key") != key:
            vin = np.linspace(spec.sweep_v[0], spec.sweep_v[1], CURVE_POINTS)
            cache.update(engine=flow.engine, key=key, vin=vin,
                         curve=dc_curves(flow.engine, vin, controls))
        return cache["vin"], cache["curve"]

    def _monitor(self, name: str, flow, planes_out, planes_in, controls,
                 numbers: dict | None = None) -> np.ndarray:
        spec = flow.spec
        tile = self._tiles[name]
        got = (numbers or {}).get(name)
        if name == "waveform":
            if got is not None:
                counts = got
            else:
                cols = min(planes_out.shape[2], 240)
                if self._wave_counts is None or self._wave_counts.shape[2] != cols:
                    self._wave_counts = np.zeros((3, 256, cols), np.uint32)
                counts = waveform(planes_out, space=spec.space, rows=256, columns=cols,
                                  out=self._wave_counts)
            return draw.draw_waveform(counts, space=spec.space, size=(TILE_H, TILE_W),
                                      out=tile)
        if name == "vectorscope":
            if got is not None:
                hist = got
            else:
                hist = self._vs_hist = vectorscope(planes_out, space=spec.space,
                                                   standard=flow.standard, out=self._vs_hist)
            return draw.draw_vectorscope(hist, standard=flow.standard, size=TILE_H,
                                         out=self._vscope)
        if name == "transfer":
            view = got
            if view is None:
                vin, curve = self._transfer_curve(flow, controls, self._own_curve)
                view = transfer_view(vin, curve, planes_in, bins=128)
            return draw.draw_transfer(view, space=spec.space, size=(TILE_H, TILE_W), out=tile)
        alarms = got
        if alarms is None:
            lim = converter_limits_v(spec.space, converter_bits=spec.converter_bits,
                                     converter_legal=spec.converter_legal)
            alarms = level_alarms(planes_out, space=spec.space, converter_limits_v=lim)
        return draw.draw_alarms(alarms, size=(TILE_H, TILE_W), out=tile)

    def _status(self, st: Status) -> np.ndarray:
        img = self._tiles["status"]
        np.copyto(img, self._status_bg)
        y = 18
        _text(img, st.title[:44], 8, y, scale=0.5, colour=_ACCENT)
        y += 18
        _text(img, st.source[:62], 8, y, scale=0.36, colour=_DIM)
        y += 18
        state = "ENDED" if st.ended else ("PAUSED" if st.paused else "PLAYING")
        _text(img, f"{state}  frame {st.frame}  {st.time_s:7.2f} s", 8, y)
        y += 17
        _text(img, f"{st.fps_shown:5.1f} fps shown of {st.fps_target:.2f}   dropped "
                   f"{st.dropped}", 8, y)
        y += 17
        flags = (f"loop {'on' if st.loop else 'off'}   chain "
                 f"{'BYPASSED' if st.bypass else 'on'}   table bound "
                 f"{st.table_bound_v * 1e3:.3f} mV")
        _text(img, flags, 8, y, scale=0.38, colour=_HOT if st.bypass else _TEXT)
        y += 22
        if not st.knobs:
            _text(img, "no live parameters in this chain", 8, y, colour=_DIM)
            y += 17
        for i, kb in enumerate(st.knobs):
            sel = i == st.selected
            val = _fmt(kb.value, kb.unit)
            tag = f"  <- {kb.driven_by}" if kb.driven_by else ""
            _text(img, f"{'>' if sel else ' '} {kb.name[:18]:<18} {val}{tag}", 8, y,
                  colour=_ACCENT if sel else _TEXT)
            frac = 0.0 if kb.hi <= kb.lo else (kb.value - kb.lo) / (kb.hi - kb.lo)
            x0, x1 = 330, TILE_W - 10
            cv2.rectangle(img, (x0, y - 8), (x1, y - 2), _DIM, 1)
            cv2.rectangle(img, (x0, y - 8), (x0 + int((x1 - x0) * min(max(frac, 0), 1)), y - 2),
                          _ACCENT if sel else _TEXT, -1)
            y += 17
            tr = self.traces.get(kb.name)
            if kb.driven_by and tr:
                y = self._trace(img, tr, kb, y)
        if st.rebuilding:
            _text(img, "rebuilding tables ...", 8, y, colour=_DIM)
            y += 17
        if st.note:
            _text(img, st.note[:64], 8, min(y, TILE_H - 24), scale=0.36, colour=_DIM)
        _text(img, "h: keys", TILE_W - 62, TILE_H - 8, scale=0.38, colour=_DIM)
        return img

    def _trace(self, img, tr, kb: Knob, y: int) -> int:
        """A short trace of a bound control: per-frame mean with its min…max band."""
        h = 34
        x0, x1 = 24, TILE_W - 10
        top, bot = y - 8, y - 8 + h
        if bot > TILE_H - 30:
            return y
        cv2.rectangle(img, (x0, top), (x1, bot), (58, 54, 50), 1)
        vals = np.array(tr)
        span = kb.hi - kb.lo if kb.hi > kb.lo else 1.0

        def ypix(v):
            return np.clip(bot - 1 - (v - kb.lo) / span * (h - 2), top + 1, bot - 1)

        n = len(vals)
        xs = x1 - 1 - (n - 1 - np.arange(n)) * (x1 - x0 - 2) / max(TRACE_FRAMES - 1, 1)
        for x, lo, hi in zip(xs, ypix(vals[:, 1]), ypix(vals[:, 2]), strict=True):
            cv2.line(img, (int(x), int(lo)), (int(x), int(hi)), (60, 96, 74), 1)
        pts = np.stack([xs, ypix(vals[:, 0])], axis=1).round().astype(np.int32)
        if n > 1:
            cv2.polylines(img, [pts], False, _TRACE, 1, cv2.LINE_AA)
        _text(img, f"now {_fmt(vals[-1, 0], kb.unit)}", x0 + 4, bot - 4, scale=0.34,
              colour=_TRACE)
        return bot + 16

    def _decorate(self, canvas, st: Status, view: ViewState, pic_box) -> None:
        y0, x0, nh, nw = pic_box
        if view.split:
            xm = x0 + nw // 2
            cv2.line(canvas, (xm, y0), (xm, y0 + nh - 1), (235, 235, 235), 1)
            _text(canvas, "source", x0 + 8, y0 + nh - 10, scale=0.45)
            _text(canvas, "processed", xm + 8, y0 + nh - 10, scale=0.45)
        if st.bypass:
            _text(canvas, "CHAIN BYPASSED", x0 + 10, y0 + 26, scale=0.7, colour=_HOT, thick=2)
        if st.error:
            lines = _wrap("chain not reloaded: " + st.error, 100)[:6]
            bh = 10 + 18 * len(lines)
            box = canvas[y0 + nh - bh:y0 + nh, x0:x0 + nw]
            box[:] = (box * 0.25).astype(np.uint8) + np.array((0, 0, 120), np.uint8)
            for i, ln in enumerate(lines):
                _text(canvas, ln, x0 + 8, y0 + nh - bh + 18 * (i + 1), scale=0.45)
        if view.help:
            from livecurve.preview.keys import BINDINGS
            bh, bw = 24 + 17 * len(BINDINGS), min(nw - 20, 640)
            by, bx = y0 + 10, x0 + 10
            box = canvas[by:by + bh, bx:bx + bw]
            box[:] = box // 5
            _text(canvas, "keys of the preview window", bx + 10, by + 18, colour=_ACCENT)
            for i, b in enumerate(BINDINGS):
                y = by + 36 + 17 * i
                _text(canvas, b.label, bx + 10, y, colour=_ACCENT)
                _text(canvas, b.text, bx + 130, y)

    # ---- the whole image ----------------------------------------------------------------
    def compose(self, src_rgb: np.ndarray, flow, *, view: ViewState, status: Status,
                controls: dict | None = None, numbers: dict | None = None,
                monitors_due: bool = True) -> np.ndarray:
        """Draw the composite for the frame *flow* has just processed.

        Parameters
        ----------
        src_rgb : ndarray (H, W, 3), uint8 or uint16
            The decoded source frame (left half of the split view).
        flow : FrameFlow
            After ``process``: its ``planes_in``, ``planes_out`` and ``rgb_out`` are read.
        view : ViewState
        status : Status
        controls : dict, optional
            The control values used for the frame (``flow.last_controls``).
        numbers : dict, optional
            Monitor numbers made ahead by :meth:`measure` for this frame; monitors
            without them are measured here.
        monitors_due : bool
            False: keep the monitor tiles drawn last time (the same monitors on), and
            draw only the picture and the status (see :data:`MONITOR_MAX_HZ`).

        Returns
        -------
        ndarray of uint8, shape (CANVAS_H, CANVAS_W, 3), BGR
            A buffer reused by the next call.
        """
        controls = controls or {}
        t = time.perf_counter()
        tm = {}
        canvas = self.canvas
        canvas.fill(8)
        pic = self._picture(src_rgb, flow, view)
        nh, nw = pic.shape[:2]
        y0, x0 = (PIC_H - nh) // 2, (PIC_W - nw) // 2
        canvas[y0:y0 + nh, x0:x0 + nw] = pic
        tm["picture"] = (time.perf_counter() - t) * 1e3
        tiles = []
        numbers = numbers or {}
        kept = self._drawn_monitors
        if not monitors_due and kept is not None and kept[0] == tuple(view.monitors):
            tiles = list(kept[1])          # the monitor tiles as last drawn
        else:
            step = self.step_for(*flow.planes_out.shape[1:])
            t = time.perf_counter()
            scoped_out = self._sampled("out", flow.planes_out, step) \
                if {"waveform", "vectorscope"} & (set(view.monitors) - set(numbers)) else None
            scoped_in = self._sampled("in", flow.planes_in, step) \
                if "transfer" in (set(view.monitors) - set(numbers)) else None
            tm["sampling"] = (time.perf_counter() - t) * 1e3
            for name in view.monitors:
                t = time.perf_counter()
                planes = flow.planes_out if name == "alarms" else scoped_out
                tiles.append((_TILE_LABELS[name], self._monitor(name, flow, planes,
                                                                scoped_in, controls,
                                                                numbers)))
                tm[name] = (time.perf_counter() - t) * 1e3
            self._drawn_monitors = (tuple(view.monitors), tuple(tiles))
        t = time.perf_counter()
        tiles.append(("", self._status(status)))
        tm["status"] = (time.perf_counter() - t) * 1e3
        t = time.perf_counter()
        tiles += [("", self._blank)] * (5 - len(tiles))
        draw.compose(tiles[:2], columns=1, tile_size=(TILE_H, TILE_W), gap=GAP,
                     out=self._column)
        canvas[0:PIC_H, PIC_W + GAP:] = self._column
        draw.compose(tiles[2:5], columns=3, tile_size=(TILE_H, TILE_W), gap=GAP,
                     out=canvas[PIC_H + GAP:, :])
        self._decorate(canvas, status, view, (y0, x0, nh, nw))
        tm["layout"] = (time.perf_counter() - t) * 1e3
        self.timings_ms = tm
        return canvas
