"""Live preview window and headless snapshots of a chain working on a clip, still or camera.

The window (OpenCV ``imshow``/``waitKeyEx``) shows the composite of
:mod:`livecurve.preview.overlay`: the processed picture, the monitors and a status panel.
It keeps real time by *dropping* frames, never by slowing down: a background thread
decodes into a buffer of two frames, each frame is due at ``seq / fps`` seconds on a
wall clock (``seq`` counts decoded frames, across loops), and a frame whose time has
passed by more than one frame period is dropped whenever a newer one is at hand.
The status panel shows the achieved rate and the number of dropped frames.

Live parameters are turned by key (:mod:`livecurve.preview.keys`) or by slider; their tables
are rebuilt on a worker thread on a copy of the engine (``FrameEngine.set_live``) and
swapped in when ready, the newest request winning, so the picture keeps running (the
window thread's numba kernels drop to one thread meanwhile, leaving the other core to the
build).  The chain file is watched (mtime and size, twice a second): an edit is reloaded and a new
frame flow built on the same worker; a bad edit keeps the last good chain and shows the
error over the picture.

Every action prints one JSON line on stdout, ``preview {...}`` (events ``ready``,
``key``, ``slider``, ``knobs``, ``reload``, ``snapshot``, ``ended``, ``end``), so scripts
and tests can follow the window.

Display check
    ``cv2.imshow`` without a reachable X server ends the whole process (Qt aborts; it is
    not a Python exception), and so does ``QT_QPA_PLATFORM=offscreen`` with the
    opencv-python wheel.  Before any window is made, :func:`display_problem` opens and
    closes a connection with Xlib's ``XOpenDisplay`` (X Window System, libX11) and the
    preview refuses with :class:`~livecurve.errors.DeviceError` pointing to
    ``--snapshot``.  The wheel also points ``QT_QPA_FONTDIR`` at a folder it does not
    ship; :func:`set_qt_font_dir` points it at a system font folder first.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import json
import math
import os
import queue
import sys
import threading
import time
from collections import deque
from pathlib import Path

import numpy as np

from livecurve.config.chainfile import load_chain
from livecurve.engine.frameflow import FrameFlow, bind_controls
from livecurve.errors import DeviceError, LivecurveError, MediaError
from livecurve.preview.keys import (
    COARSE_STEPS,
    FINE_STEPS,
    KnobScale,
    Rebuilder,
    SliderWindow,
    action_for,
    engine_with,
)
from livecurve.preview.overlay import (
    MONITOR_MAX_HZ,
    MONITORS,
    Composer,
    Knob,
    Status,
    ViewState,
    check_monitors,
)

#: Font folders tried for Qt's labels (Debian's DejaVu first).
FONT_DIRS = ("/usr/share/fonts/truetype/dejavu", "/usr/share/fonts/truetype",
             "/usr/share/fonts")
#: Seconds between looks at the chain file's mtime.
WATCH_PERIOD_S = 0.5
#: Longest a new frame waits for a knob's rebuild (seconds): about one frame period at
#: 30 frames/s, longer than a knob rebuild of the demo chains (0.8–7.8 ms measured here).
KNOB_WAIT_S = 0.03
#: Frames the decoder may hold ahead of the window.
BUFFER_FRAMES = 2
#: Samples a second the planar preview's picture and monitors read at most: above it they
#: read every second (third, …) line and sample, so the window keeps time at a fixed cost
#: per second: 1080p30 and 720p60 are read as 960x540 and 640x360, 720p30 in full.
VIEW_MAX_SAMPLES_PER_S = 1280 * 720 * 30


#: Samples the planar preview's scopes read per frame at most (a fixed cost per frame).
SCOPE_SAMPLES = 260_000


def view_step(info) -> int:
    """Lines and samples between those the planar preview's picture and monitors read:
    the smallest step that keeps them within :data:`VIEW_MAX_SAMPLES_PER_S`."""
    fps = float(info.fps or 30.0)
    step = 1
    while math.ceil(info.width / step) * math.ceil(info.height / step) * fps \
            > VIEW_MAX_SAMPLES_PER_S and step < 8:
        step += 1
    return step


def emit(event: str, stream=None, **fields) -> None:
    """Print one ``preview {json}`` state line and flush it."""
    stream = stream or sys.stdout
    stream.write("preview " + json.dumps({"event": event, **fields}, default=str) + "\n")
    stream.flush()


# ---- display ------------------------------------------------------------------------------
def display_problem(env=None) -> str | None:
    """Why no window can be opened here, or None when an X display answers."""
    env = os.environ if env is None else env
    plat = env.get("QT_QPA_PLATFORM", "")
    if plat and plat != "xcb":
        return (f"QT_QPA_PLATFORM={plat} is set; OpenCV's window needs an X display "
                "(unset it, or use xcb)")
    disp = env.get("DISPLAY", "")
    if not disp:
        if env.get("WAYLAND_DISPLAY"):
            return "WAYLAND_DISPLAY is set but DISPLAY is not; the window needs X (XWayland)"
        return "no display: DISPLAY is not set"
    name = ctypes.util.find_library("X11") or "libX11.so.6"
    try:
        xlib = ctypes.CDLL(name)
    except OSError as exc:
        return f"cannot load libX11 to reach the display {disp!r}: {exc}"
    xlib.XOpenDisplay.restype = ctypes.c_void_p
    xlib.XOpenDisplay.argtypes = [ctypes.c_char_p]
    xlib.XCloseDisplay.argtypes = [ctypes.c_void_p]
    handle = xlib.XOpenDisplay(disp.encode())
    if not handle:
        return f"cannot connect to the X display {disp!r}"
    xlib.XCloseDisplay(handle)
    return None


def require_display() -> None:
    """Raise DeviceError (pointing to ``--snapshot``) unless a window can be opened."""
    why = display_problem()
    if why:
        raise DeviceError(f"preview window: {why}. Without a display, write the same picture "
                          "and monitors to a file with --snapshot OUT.png [--at SECONDS]")


def set_qt_font_dir() -> str | None:
    """Point ``QT_QPA_FONTDIR`` at a system font folder if it names a missing one."""
    cur = os.environ.get("QT_QPA_FONTDIR", "")
    if cur and os.path.isdir(cur) and any(Path(cur).iterdir()):
        return cur
    for d in FONT_DIRS:
        if os.path.isdir(d):
            os.environ["QT_QPA_FONTDIR"] = d
            return d
    return None


# ---- clock and decoder ----------------------------------------------------------------------
class PlayClock:
    """Wall-clock schedule of frames: frame *seq* is due at ``origin + seq / fps``.

    Parameters
    ----------
    fps : float
        Source rate, Hz.
    now : float
        Wall-clock time (s) at which frame 0 is due.
    paced : bool
        False: every frame is due at once and none is ever late (throughput runs).
    """

    def __init__(self, fps: float, now: float, *, paced: bool = True):
        self.period_s = 1.0 / float(fps)
        self.origin_s = float(now)
        self.paced = paced
        self.paused_at: float | None = None

    def due(self, seq: int) -> float:
        """Wall-clock time (s) frame *seq* is due."""
        return self.origin_s + seq * self.period_s if self.paced else -math.inf

    def late(self, seq: int, now: float) -> bool:
        """True when frame *seq* is more than one frame period overdue (never when paused)."""
        return self.paced and self.paused_at is None and now - self.due(seq) > self.period_s

    def pause(self, now: float) -> None:
        if self.paused_at is None:
            self.paused_at = now

    def resume(self, now: float, next_seq: int) -> None:
        """Play on: frame *next_seq* is due *now*."""
        self.origin_s = now - next_seq * self.period_s
        self.paused_at = None


class ReadyFrame:
    """A planar frame with the chain's output, the window's views of it
    (:meth:`FrameFlow.make_views`) and the monitors' numbers (:meth:`Composer.measure`),
    made ahead on the decoder thread.

    Shown as made when :attr:`token` still matches the session (the same flow, engine,
    bypass and control index); otherwise the window runs the chain again.
    """

    __slots__ = ("frame", "out", "controls", "token", "views", "numbers")

    def __init__(self, frame, out, controls, token, views, numbers=None):
        self.frame, self.out, self.controls, self.token = frame, out, controls, token
        self.views, self.numbers = views, numbers

    @property
    def index(self) -> int:
        return self.frame.index

    @property
    def time_s(self) -> float:
        return self.frame.time_s

    @property
    def lap(self) -> int:
        return self.frame.lap

    @property
    def y(self):
        return self.frame.y

    @property
    def cb(self):
        return self.frame.cb

    @property
    def cr(self):
        return self.frame.cr


class FramePump:
    """Decode a source on a background thread into a buffer of at most *capacity* frames.

    When the buffer is full and its oldest frame is late, that frame is dropped for the
    newer one, so the buffer holds the freshest frames while the decoder runs no faster
    than real time.  With ``loop`` off, the pump stops at the end of a pass (``ended``)
    and holds the first frame of the next pass until :meth:`restart`.

    *prepare*, when given, is called as ``prepare(seq, frame)`` on the decoder thread for
    each frame before it is buffered, and its result is buffered instead (the window runs
    the chain on the next frames there while it shows the present one).

    Attributes
    ----------
    dropped : int
        Frames decoded but never shown (dropped here or by :meth:`take`).
    error : Exception or None
        What stopped the decoder, other than the end of the source.
    """

    def __init__(self, src, clock: PlayClock, *, capacity: int = BUFFER_FRAMES,
                 loop: bool = True, clock_fn=time.perf_counter, prepare=None):
        self.src = src
        self.prepare = prepare
        self.clock = clock
        self.capacity = int(capacity)
        self.loop = loop
        self.dropped = 0
        self.error: Exception | None = None
        self.ended = False
        self._now = clock_fn
        self._cond = threading.Condition()
        self._buf: deque = deque()
        self._seq = 0
        self._lap = 0
        self._held = None
        self._restart = False
        self._stop = False
        self._thread = threading.Thread(target=self._run, name="livecurve-decode", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            while True:
                with self._cond:
                    while self.ended and not (self._restart or self._stop):
                        self._cond.wait()
                    if self._stop:
                        return
                    self._restart = False
                    held, self._held = self._held, None
                fr = held if held is not None else next(self.src)
                if fr.lap != self._lap:
                    self._lap = fr.lap
                    if not self.loop:
                        with self._cond:
                            self._held, self.ended = fr, True
                            self._cond.notify_all()
                        continue
                self._put(fr)
        except StopIteration:
            pass
        except Exception as exc:  # noqa: BLE001 - handed to the window thread to report
            self.error = exc
        with self._cond:
            self.ended = True
            self._cond.notify_all()

    def _put(self, fr) -> None:
        with self._cond:
            seq = self._seq
            self._seq += 1
        if self.prepare is not None:
            if self.clock.late(seq, self._now()):
                # already overdue: dropped before any work on it, so that a chain slower
                # than the clip drops frames and keeps time instead of slowing down
                with self._cond:
                    self.dropped += 1
                    self._cond.notify_all()
                return
            # the heavy per-frame work, on this thread while the window shows the frame
            # before (outside the lock: the window thread keeps taking frames meanwhile)
            fr = self.prepare(seq, fr)
        with self._cond:
            while not self._stop:
                if len(self._buf) < self.capacity:
                    self._buf.append((seq, fr))
                    break
                if self.clock.late(self._buf[0][0], self._now()):
                    self._buf.popleft()
                    self.dropped += 1
                    self._buf.append((seq, fr))
                    break
                self._cond.wait(self.clock.period_s / 4)
            self._cond.notify_all()

    def take(self, now: float, *, wait_s: float = 0.0):
        """The next frame to show as ``(seq, Frame)``, or None.

        Late frames are dropped while a newer one is buffered; the last one is returned
        even when late (nothing fresher exists).
        """
        with self._cond:
            if not self._buf and wait_s > 0 and not self.ended:
                self._cond.wait(wait_s)
            while len(self._buf) > 1 and self.clock.late(self._buf[0][0], now):
                self._buf.popleft()
                self.dropped += 1
            item = self._buf.popleft() if self._buf else None
            self._cond.notify_all()
            return item

    def buffered(self) -> list[int]:
        """Sequence numbers of the frames waiting in the buffer, oldest first."""
        with self._cond:
            return [seq for seq, _ in self._buf]

    @property
    def next_seq(self) -> int:
        """The number the next decoded frame will get."""
        with self._cond:
            return self._seq

    @property
    def exhausted(self) -> bool:
        """The decoder has ended and every buffered frame was taken."""
        with self._cond:
            return self.ended and not self._buf

    def restart(self) -> None:
        """After the end of a pass: go on with the next pass."""
        with self._cond:
            self.ended = False
            self._restart = True
            self._cond.notify_all()

    def close(self) -> None:
        with self._cond:
            self._stop = True
            self._cond.notify_all()
        self._thread.join(timeout=2.0)


def _live_inputs(flow):
    """Control sources of *flow* that capture from a device (started and stopped here)."""
    return flow.live_inputs()


# ---- the per-frame work, shared by window, snapshot and benchmark ---------------------------
class PreviewSession:
    """A chain, its frame flow, the view and the knobs: everything but the window.

    Parameters
    ----------
    chain_path : str or os.PathLike
    info : MediaInfo
        The opened source's facts (size, rate, matrix, kind).
    controls : sequence of str
        ``--control`` options (:func:`livecurve.engine.frameflow.bind_controls`).
    exact : bool
        Solver per pixel instead of tables.
    monitors : sequence of str or None
        Monitors shown at the start (None: all of :data:`~livecurve.preview.overlay.MONITORS`).
    scope_step : int or None
        Lines and samples between those the scopes read (None: by picture size, see
        :mod:`livecurve.preview.overlay`).
    """

    def __init__(self, chain_path, info, *, controls=(), exact: bool = False, monitors=None,
                 scope_step: int | None = None, drift: bool = False,
                 speedup: float | None = None):
        self.chain_path = Path(chain_path)
        self.info = info
        self.control_items = list(controls or ())
        self.exact = bool(exact)
        self.drift, self.speedup = bool(drift), speedup
        self._flash = None  # flash estimate while controls modulate the picture
        self._flash_verdict = "ok"
        self.view = ViewState(monitors=check_monitors(monitors))
        self.composer = Composer(scope_step=scope_step)
        self.flow = self.build_flow({})
        self.wanted = dict(self.flow.engine.state.live)
        #: Knobs the user has set since the start or the last reset (kept over reloads).
        self.touched: set[str] = set()
        self.selected = 0
        self.error = ""
        self.note = ""
        self.canvas = None
        self.in_legal = True
        self.in_bits = 8      # a planar clip's bits per code (10 or 12: uint16 planes)
        self._chain_lock = threading.Lock()   # one chain run at a time (two threads run it)
        self._new_frames = -1                  # new frames drawn, less one
        self.shown_controls = None             # control values of the frame drawn last
        self._scope_step = scope_step

    @property
    def spec(self):
        return self.flow.spec

    @property
    def use_clip_index(self) -> bool:
        """Controls follow the clip's own frame numbers (clips and sequences, no live input)."""
        return self.info.kind in ("clip", "sequence") and not any(_live_inputs(self.flow))

    def build_flow(self, carry: dict) -> FrameFlow:
        """Load the chain file and build a frame flow, with the user's knob values carried
        over (those inside the reloaded chain's ranges)."""
        spec = load_chain(self.chain_path)
        clip = self.info.path if self.info.kind == "clip" else None
        bound = bind_controls(spec, self.control_items, clip_path=clip)
        flow = FrameFlow(spec, width=self.info.width, height=self.info.height,
                         fps=self.info.fps, clip_matrix=self.info.colour_matrix,
                         controls=bound, exact=self.exact, out_dtype=np.uint8,
                         drift=self.drift, speedup=self.speedup)
        self._flash = None
        if bound:
            from livecurve.monitors.flash import FlashMeter
            self._flash = FlashMeter(self.info.fps, space=spec.space, standard=flow.standard)
        keep = {n: v for n, v in carry.items()
                if n in spec.live and spec.live[n].lo <= v <= spec.live[n].hi
                and n not in flow.engine.modulated}
        if keep:
            flow.engine = engine_with(flow.engine, keep)
        return flow

    # -- knobs -----------------------------------------------------------------------------
    def knob_names(self) -> list[str]:
        return list(self.spec.live)

    def driven_by(self, name: str) -> str | None:
        for cs, _ in self.flow.controls:
            if cs.drives == name:
                return cs.name
        return None

    def knobs(self) -> list[Knob]:
        out = []
        # the controls of the frame on show (frames are made ahead on another thread)
        ctl = self.flow.last_controls if self.shown_controls is None else self.shown_controls
        for name, ls in self.spec.live.items():
            drv = self.driven_by(name)
            value = self.wanted.get(name, ls.value)
            if drv and name in ctl:  # the control's present value (mean over the frame)
                value = float(np.mean(ctl[name]))
            out.append(Knob(name, value, ls.unit, ls.lo, ls.hi, drv))
        return out

    def turn(self, steps: int) -> str | None:
        """Move the selected knob by slider *steps*; returns its name when it changed."""
        names = self.knob_names()
        if not names:
            self.note = "this chain has no live parameters"
            return None
        name = names[self.selected % len(names)]
        drv = self.driven_by(name)
        if drv:
            self.note = f"{name} is driven by the control '{drv}'"
            return None
        ls = self.spec.live[name]
        self.wanted[name] = KnobScale(ls.lo, ls.hi).step(self.wanted[name], steps)
        self.touched.add(name)
        return name

    def set_knob(self, name: str, value: float) -> None:
        """Set a knob the user moved (a slider); clamped to its range."""
        ls = self.spec.live[name]
        self.wanted[name] = min(max(float(value), ls.lo), ls.hi)
        self.touched.add(name)

    def reset_knobs(self) -> dict:
        """Every knob back to the chain file's value; returns the values to build."""
        self.touched.clear()
        for name, ls in self.spec.live.items():
            self.wanted[name] = ls.value
        return dict(self.wanted)

    def carry(self) -> dict:
        """The knob values the user has set, to keep over a reload."""
        return {n: self.wanted[n] for n in self.touched if n in self.wanted}

    def apply(self, act: str) -> dict | None:
        """Carry out a toggle or knob action; returns the knob values to build, if any."""
        view = self.view
        if act == "bypass":
            self.flow.bypass = not self.flow.bypass
        elif act in ("split", "zebra", "help"):
            setattr(view, act, not getattr(view, act))
        elif act in MONITORS:
            view.toggle_monitor(act)
        elif act in ("next_knob", "prev_knob"):
            n = max(len(self.spec.live), 1)
            self.selected = (self.selected + (1 if act == "next_knob" else -1)) % n
        elif act in ("coarse_up", "coarse_down", "fine_up", "fine_down"):
            steps = COARSE_STEPS if act.startswith("coarse") else FINE_STEPS
            name = self.turn(steps if act.endswith("up") else -steps)
            return None if name is None else {name: self.wanted[name]}
        elif act == "reset":
            return self.reset_knobs()
        return None

    def swap_flow(self, flow: FrameFlow) -> None:
        """Put a reloaded chain's flow in place (bypass and device inputs carried over)."""
        old, self.flow = self.flow, flow
        flow.bypass = old.bypass
        for li in _live_inputs(old):
            li.stop()
        for li in _live_inputs(flow):
            li.start()
        self.wanted = dict(flow.engine.state.live)
        self.touched &= set(flow.spec.live)
        self.error = ""

    # -- one frame ---------------------------------------------------------------------------
    def status(self, **kw) -> Status:
        st = Status(title=self.spec.title or self.chain_path.name,
                    source=f"{self.info.kind} {Path(str(self.info.path)).name}  "
                           f"{self.info.width}x{self.info.height}  {self.info.fps:.3f} fps",
                    bypass=self.flow.bypass, knobs=self.knobs(),
                    selected=self.selected % max(len(self.spec.live), 1),
                    table_bound_v=self.flow.engine.worst_table_err_v, note=self.note,
                    error=self.error, fps_target=self.info.fps)
        for k, v in kw.items():
            setattr(st, k, v)
        return st

    def render(self, rgb, index: int, *, new_frame: bool = True, **status) -> np.ndarray:
        """Process one decoded frame (R′G′B′ codes, or a :class:`ReadyFrame` made ahead)
        and draw the composite (BGR, reused buffer)."""
        self._check_live_inputs()
        numbers = None
        ready = rgb if isinstance(rgb, ReadyFrame) else None
        if ready is not None:
            rgb = ready.frame.rgb
        if ready is not None and ready.token == self._token(index):
            self.flow.show_views(ready.views)        # made ahead on the decoder thread
            ctl_used, numbers = ready.controls, ready.numbers
            if ready.views[3] is not None:
                rgb = ready.views[3]
        elif view_step(self.info) > 1:
            views, ctl_used = self._rgb_views(rgb, index)
            self.flow.show_views(views)
            rgb = views[3]
        else:
            with self._chain_lock:
                self.flow.process(rgb, index)
                ctl_used = self.flow.last_controls
        if new_frame and self._flash is not None and not self.flow.bypass:
            self._check_flash(index)
        self.shown_controls = ctl_used
        ctl = {} if self.flow.bypass else ctl_used
        if new_frame:
            self.composer.push_controls(ctl)
        self.canvas = self.composer.compose(rgb, self.flow, view=self.view,
                                            monitors_due=self._monitors_due(new_frame),
                                            status=self.status(**status), controls=ctl,
                                            numbers=numbers)
        return self.canvas

    def _check_flash(self, index: int, planes=None) -> None:
        """Photosensitive-flash estimate (ITU-R BT.1702) on the modulated output, on the
        source's own timeline (frame *index*; dropped frames keep their place, so the verdict
        is the render's): warn in the window and on the console when it rises above ok."""
        if planes is None:
            planes = self.flow.planes_out
        fr = self._flash.push(planes, index=index)
        verdict = fr.level
        if verdict != self._flash_verdict and verdict != "ok":
            text = (f"FLASH {verdict.upper()}: the modulation makes the picture flash (ITU-R "
                    "BT.1702 estimate) — risk for people with photosensitive epilepsy")
            print(f"livecurve: {text}", file=sys.stderr, flush=True)
            self.note = text
        self._flash_verdict = verdict

    def render_planes(self, fr, index: int, *, new_frame: bool = True,
                      **status) -> np.ndarray:
        """As :meth:`render` for a :class:`~livecurve.media.planes.PlaneFrame`: the chain runs
        in one pass on the planes; the picture and the monitors read every
        :data:`VIEW_STEP`-th line and sample of them (a fixed cost per frame)."""
        from livecurve.outputs.render import flash_volts
        self._check_live_inputs()
        flow = self.flow
        step = view_step(self.info)
        numbers = None
        if isinstance(fr, ReadyFrame) and fr.token == self._token(index):
            out, ctl_used = fr.out, fr.controls      # made ahead on the decoder thread
            src_rgb = flow.show_views(fr.views)
            numbers = fr.numbers
        else:
            fr = fr.frame if isinstance(fr, ReadyFrame) else fr
            out, ctl_used = self._run_chain(fr, index)
            src_rgb = flow.view_planes((fr.y, fr.cb, fr.cr), out, step=step,
                                       in_legal=self.in_legal, in_bits=self.in_bits,
                                       source_rgb=self.view.split)
        self._set_scope_step(flow.planes_out)
        if new_frame and self._flash is not None and not flow.bypass:
            fv = (numbers or {}).get("flash")
            self._check_flash(index, flash_volts(flow, out) if fv is None else fv)
        self.shown_controls = ctl_used
        ctl = {} if flow.bypass else ctl_used
        if new_frame:
            self.composer.push_controls(ctl)
        self.canvas = self.composer.compose(src_rgb, flow, view=self.view,
                                            monitors_due=self._monitors_due(new_frame),
                                            status=self.status(**status), controls=ctl,
                                            numbers=numbers)
        return self.canvas

    def _monitors_due(self, new_frame: bool) -> bool:
        """Redraw the monitors on this frame?  Every frame up to MONITOR_MAX_HZ frames a
        second, every n-th new frame of a faster clip; always on a redraw of a held frame
        (a knob, a toggle)."""
        if not new_frame:
            return True
        every = max(1, round(float(self.info.fps or 30.0) / MONITOR_MAX_HZ))
        self._new_frames += 1
        return self._new_frames % every == 0

    def _set_scope_step(self, planes_out) -> None:
        """Scopes read at most SCOPE_SAMPLES samples a frame (unless a step was given)."""
        if self._scope_step is None:
            n = planes_out.shape[1] * planes_out.shape[2]
            self.composer.scope_step = max(1, math.ceil(math.sqrt(n / SCOPE_SAMPLES)))

    def _token(self, index: int) -> tuple:
        """What a frame's chain output and views depend on besides the frame: the flow,
        its engine (a knob turn swaps it), bypass, the input range, the split view, and the
        control index."""
        f = self.flow
        return (id(f), id(f.engine), f.bypass, (self.in_legal, self.in_bits), self.view.split,
                index)

    def _run_chain(self, fr, index: int):
        """The chain on every view_step-th line of a planar frame: (output planes, the
        control values used).  The picture, the monitors and the flash estimate read no
        other lines, and each line goes through the chain as in a full pass (it is
        filtered along itself)."""
        flow = self.flow
        out = tuple(np.empty(a.shape, np.uint8) for a in (fr.y, fr.cb, fr.cr))
        with self._chain_lock:
            flow.process_planes(fr.y, fr.cb, fr.cr, index, in_legal=self.in_legal,
                                in_bits=self.in_bits, out=out, line_step=view_step(self.info))
            ctl = dict(flow.last_controls)
        return out, ctl

    def prepare(self, seq: int, fr):
        """For :class:`FramePump`: run the chain on a frame ahead of showing it, and make
        the window's views and the monitors' numbers of it."""
        index = fr.index if self.use_clip_index else seq
        token = self._token(index)
        if not hasattr(fr, "y"):
            return self._prepare_rgb(fr, index, token)
        split = token[4]      # the split view needs the source's picture as well
        out, ctl = self._run_chain(fr, index)
        flow = self.flow
        views = flow.make_views((fr.y, fr.cb, fr.cr), out, step=view_step(self.info),
                                in_legal=self.in_legal, in_bits=self.in_bits,
                                source_rgb=split)
        self._set_scope_step(views[1])
        bypass = token[2]
        numbers = self.composer.measure(flow, views[1], tuple(self.view.monitors),
                                        planes_in=views[0], controls={} if bypass else ctl)
        if self._flash is not None and not bypass:
            from livecurve.outputs.render import flash_volts
            numbers["flash"] = flash_volts(flow, out)
        return ReadyFrame(fr, out, ctl, token, views, numbers)

    def _prepare_rgb(self, fr, index: int, token: tuple):
        """:meth:`prepare` for a decoded R′G′B′ frame (a camera, a still, a clip the
        one-pass kernel does not take): the whole frame through the chain, into arrays of
        its own."""
        flow = self.flow
        views, ctl = self._rgb_views(fr.rgb, index)
        pin, pout, rout, _ = views
        bypass = token[2]
        numbers = self.composer.measure(flow, pout, tuple(self.view.monitors),
                                        planes_in=pin, controls={} if bypass else ctl)
        return ReadyFrame(fr, rout, ctl, token, views, numbers)

    def _rgb_views(self, rgb: np.ndarray, index: int) -> tuple:
        """An R′G′B′ frame through the chain as the window reads it: every
        :func:`view_step`-th line and sample (only those lines run; at 1080p30 every
        second one), as ``((planes_in, planes_out, rgb_out, source R′G′B′ at the same
        size or None at full size), controls used)``."""
        step = view_step(self.info)
        with self._chain_lock:
            pin, pout, rout, ctl = self.flow.process_fresh(rgb, index, step=step)
        src = np.ascontiguousarray(rgb[::step, ::step]) if step > 1 else None
        return (pin, pout, rout, src), ({} if ctl is None else ctl)

    def _check_live_inputs(self) -> None:
        """Report a lost device, overflows or starved reads in the window and on the console
        (once per change); the knob then holds its last value."""
        for li in _live_inputs(self.flow):
            st = li.status
            text = "" if st.ok else f"audio input {li.name}: {st}"
            if text and text != getattr(self, "_live_text", ""):
                print(f"livecurve: {text}", file=sys.stderr, flush=True)
                self.note = text
            self._live_text = text

    def state(self) -> dict:
        """The toggles and knobs, for the ``preview`` state lines."""
        names = self.knob_names()
        sel = names[self.selected % len(names)] if names else None
        return {"bypass": self.flow.bypass, "split": self.view.split,
                "zebra": self.view.zebra, "help": self.view.help,
                "monitors": list(self.view.monitors), "knob": sel,
                "wanted": dict(self.wanted), "live": dict(self.flow.engine.state.live)}


def _snapshot_name(stem: str, frame: int) -> Path:
    base = f"livecurve-{stem}-f{frame:06d}"
    p = Path(f"{base}.png")
    k = 2
    while p.exists():
        p = Path(f"{base}-{k}.png")
        k += 1
    return p


def write_composite(path, bgr: np.ndarray, *, force: bool = False) -> Path:
    """Write a composite (BGR) as an 8-bit PNG, atomically."""
    from livecurve.media.atomic import write_still
    return write_still(path, np.ascontiguousarray(bgr[:, :, ::-1]), force=force)


# ---- the window -----------------------------------------------------------------------------
class _Player:
    """The window's loop: frames on time, finished rebuilds, the chain file, keys."""

    def __init__(self, cv2, session: PreviewSession, src, *, max_frames, out=None):
        import numba
        self.cv2, self.session, self.out = cv2, session, out
        self.numba, self.threads = numba, numba.get_num_threads()
        self.max_frames = max_frames
        self.title = f"livecurve preview - {session.chain_path.name}"
        self.clock = PlayClock(session.info.fps, time.perf_counter())
        # the schedule starts when the first picture is shown (opening the window and
        # making the first frame take a while): no frame is late before that
        self.clock.pause(time.perf_counter())
        self.started = False
        self.pump = FramePump(src, self.clock, loop=True, prepare=session.prepare)
        self.rebuilder = Rebuilder(session.build_flow, session.flow.engine)
        self.win = SliderWindow(cv2, self.title, session)
        self.shown = 0
        self.held = self.pending = None          # (seq, Frame) on screen / next due
        self.paused = self.ended = self.dirty = self.ready = False
        self.stamps: deque = deque(maxlen=64)
        self.watched = _stat(session.chain_path)
        self.next_watch = time.perf_counter() + WATCH_PERIOD_S

    def say(self, event: str, **kw) -> None:
        emit(event, self.out, **kw)

    def fps_shown(self) -> float:
        """Frames shown per second over the last two seconds."""
        recent = [t for t in self.stamps if t >= self.stamps[-1] - 2.0] if self.stamps else []
        if len(recent) < 2:
            return 0.0
        return (len(recent) - 1) / max(recent[-1] - recent[0], 1e-9)

    def display(self, item, *, new_frame: bool) -> None:
        seq, fr = item
        s = self.session
        idx = fr.index if s.use_clip_index else seq
        # While tables are rebuilt on the worker, the window thread's numba kernels run on
        # one thread: both at once on two cores would oversubscribe them (results are the
        # same with any number of threads).
        if new_frame and self.rebuilder.busy:
            # a knob just turned: most rebuilds (one run's 1-D tables) take a few ms, so
            # wait for them up to KNOB_WAIT_S rather than draw one more frame of the old
            # curve; a long one (a 2-D table) goes on while frames keep coming
            self.numba.set_num_threads(1)
            if self.rebuilder.wait_knobs(KNOB_WAIT_S):
                self.take_results()
        self.numba.set_num_threads(1 if self.rebuilder.busy else self.threads)
        draw_frame = s.render_planes if hasattr(fr, "y") else s.render
        arg = fr if hasattr(fr, "y") or isinstance(fr, ReadyFrame) else fr.rgb
        canvas = draw_frame(arg, idx, new_frame=new_frame,
                            frame=fr.index, time_s=fr.time_s, fps_shown=self.fps_shown(),
                            dropped=self.pump.dropped, paused=self.paused, ended=self.ended,
                            loop=self.pump.loop, rebuilding=self.rebuilder.busy)
        self.win.show(canvas)
        if new_frame:
            self.shown += 1
            self.stamps.append(time.perf_counter())
        self.dirty = False

    # -- housekeeping between frames ---------------------------------------------------------
    def take_results(self) -> None:
        s = self.session
        while True:
            try:
                kind, obj, err = self.rebuilder.results.get_nowait()
            except queue.Empty:
                return
            self.dirty = True
            if kind == "knobs" and obj is not None:
                s.flow.engine = obj
                s.note = ""
                self.say("knobs", live=dict(obj.state.live))
            elif kind == "knobs":
                s.note = f"knob not applied: {err}"[:200]
                s.wanted = dict(s.flow.engine.state.live)
                self.win.sync()
                self.say("knobs", error=err)
            elif obj is not None:
                s.swap_flow(obj)
                self.win.reopen_if_knobs_changed()
                self.win.sync()
                self.say("reload", ok=True, title=obj.spec.title, live=dict(s.wanted))
            else:
                s.error = err
                self.say("reload", ok=False, error=err)

    def watch(self, now: float) -> None:
        if now >= self.next_watch:
            self.next_watch = now + WATCH_PERIOD_S
            st = _stat(self.session.chain_path)
            if st is not None and st != self.watched:
                self.watched = st
                self.rebuilder.want_reload(self.session.carry())
        if self.win.slider_moved:
            moved = {n: self.session.wanted[n] for n in self.win.slider_moved}
            self.win.slider_moved.clear()
            self.rebuilder.want_knobs(moved)
            self.dirty = True
            self.say("slider", moved=moved, **self.session.state())

    def advance(self, now: float) -> None:
        """Show the next frame when it is due; redraw the held one when something changed."""
        if not (self.paused or self.ended):
            if self.pending is None:
                self.pending = self.pump.take(now)
            if self.pending is not None and not self.started:
                self.started = True
                self.clock.resume(now, self.pending[0])
            if self.pending is not None and self.clock.due(self.pending[0]) <= now + 0.002:
                self.held, self.pending = self.pending, None
                self.display(self.held, new_frame=True)
            elif self.pending is None and self.pump.exhausted:
                if self.pump.error is not None:
                    raise self.pump.error
                self.ended, self.dirty = True, True
                self.clock.pause(now)
                self.say("ended", frames_shown=self.shown, **self.session.state())
        if self.dirty and self.held is not None and (self.paused or self.ended):
            self.display(self.held, new_frame=False)
        if not self.ready and self.held is not None:
            self.ready = True
            h, w = self.session.canvas.shape[:2]
            self.say("ready", title=self.title, width=int(w), height=int(h),
                     **self.session.state())

    def wait_ms(self) -> int:
        if self.pending is not None and not self.paused:
            left = (self.clock.due(self.pending[0]) - time.perf_counter()) * 1e3
            return int(min(max(left, 1), 30))
        return 20 if (self.paused or self.ended) else 5

    # -- keys ----------------------------------------------------------------------------------
    def play_on(self, now: float) -> None:
        if self.ended:
            self.ended = False
            self.clock.resume(now, self.pump.next_seq)
            self.pump.restart()
        else:
            self.clock.resume(now, self.held[0] + 1 if self.held else 0)
        self.paused = False

    def on_key(self, act: str, now: float) -> bool:
        """Carry out an action; False to quit."""
        s = self.session
        if act == "quit":
            self.say("key", action=act, **s.state())
            return False
        self.dirty = True
        if act == "pause":
            if self.paused or self.ended:
                self.play_on(now)
            else:
                self.paused = True
                self.clock.pause(now)
        elif act == "step":
            self.paused = True
            self.clock.pause(now)
            nxt = self.pending or self.pump.take(now, wait_s=1.0)
            self.pending = None
            if nxt is not None:
                self.held = nxt
                self.display(nxt, new_frame=True)
        elif act == "loop":
            self.pump.loop = not self.pump.loop
            if self.pump.loop and self.ended:
                self.play_on(now)
        elif act == "snapshot":
            self.snapshot()
            return True
        else:
            values = s.apply(act)
            if values:
                self.win.sync()
                self.rebuilder.want_knobs(values)
        self.say("key", action=act, paused=self.paused, ended=self.ended,
                 loop=self.pump.loop, **s.state())
        return True

    def snapshot(self) -> None:
        s = self.session
        frame = self.held[1].index if self.held else 0
        try:
            path = write_composite(_snapshot_name(s.chain_path.stem, frame), s.canvas)
        except LivecurveError as exc:
            s.note = f"snapshot not written: {exc}"[:200]
            self.say("snapshot", error=str(exc), **s.state())
            return
        s.note = f"wrote {path}"
        self.say("snapshot", path=str(path.resolve()), frame=frame, **s.state())

    # -- the loop ------------------------------------------------------------------------------
    def run(self) -> int:
        try:
            for li in _live_inputs(self.session.flow):
                li.start()
            while True:
                now = time.perf_counter()
                self.take_results()
                self.watch(now)
                self.advance(now)
                if self.max_frames is not None and self.shown >= self.max_frames:
                    break
                act = action_for(self.cv2.waitKeyEx(self.wait_ms()))  # also lets Qt draw
                if act is None:
                    if self.win.closed():
                        break
                elif not self.on_key(act, time.perf_counter()):
                    break
        except KeyboardInterrupt:
            pass
        finally:
            self.numba.set_num_threads(self.threads)
            self.pump.close()
            self.rebuilder.close()
            for li in _live_inputs(self.session.flow):
                li.stop()
            with contextlib.suppress(Exception):
                self.cv2.destroyAllWindows()
                self.cv2.waitKey(1)
        self.say("end", frames_shown=self.shown, dropped=self.pump.dropped,
                 **self.session.state())
        return 0


def _stat(path: Path):
    try:
        st = path.stat()
    except OSError:
        return None
    return (st.st_mtime_ns, st.st_size)


# ---- entry point ----------------------------------------------------------------------------
def write_snapshot(session: PreviewSession, fr, output, *, force: bool = False) -> Path:
    """Process one decoded frame and write the composite to *output* (PNG)."""
    for li in _live_inputs(session.flow):
        li.start()
    try:
        canvas = session.render(fr.rgb, fr.index, frame=fr.index, time_s=fr.time_s,
                                paused=True)
    finally:
        for li in _live_inputs(session.flow):
            li.stop()
    return write_composite(output, canvas, force=force)


def run_preview(chain_path, source, *, snapshot=None, at_s=None, controls=(), exact=False,
                monitors=None, max_frames=None, force: bool = False, drift: bool = False,
                speedup: float | None = None, planar: bool = True) -> int:
    """Preview a chain on a source: a live window, or one composite written to a PNG.

    Parameters
    ----------
    chain_path : str or os.PathLike
        Chain file (TOML); watched and reloaded on change while the window is open.
    source : str
        A clip, a still, an image sequence or ``camera:N``.
    snapshot : str or os.PathLike, optional
        Write the composite of the frame at *at_s* to this ``.png`` and return; no
        window is opened (works without a display).
    at_s : float, optional
        Source time to start at (s); default 0.
    controls : sequence of str
        ``--control NAME=SOURCE`` options.
    exact : bool
        Solver per pixel instead of tables (slow).
    planar : bool
        Run the window on the clip's Y′CbCr planes (one-pass kernel, monitors on reduced
        views) when the clip and chain allow it (:func:`planar_ok`); False forces the
        R′G′B′ path.  On by default: it drops fewer frames in the window on 2 cores
        (benchmarks/README.md, "Real time at HD").
    monitors : sequence of str or str, optional
        Monitors shown at the start, from ``waveform vectorscope transfer alarms``.
    max_frames : int, optional
        Close the window after this many frames were shown.
    force : bool
        Let *snapshot* replace an existing file.

    Returns
    -------
    int
        Exit status, 0.

    Raises
    ------
    DeviceError
        No display to open a window on (the message points to ``--snapshot``).
    ConfigError, MediaError, OutputError
        Bad chain file, source or output.
    """
    from livecurve.media.atomic import check_target
    from livecurve.media.source import open_source
    check_monitors(monitors)
    if max_frames is not None and (isinstance(max_frames, bool) or int(max_frames) < 1):
        raise LivecurveError(f"--max-frames {max_frames!r}: give a positive number of frames")
    start = 0.0 if at_s is None else float(at_s)
    if snapshot is not None:
        out = check_target(snapshot, force=force)
        if out.suffix.lower() != ".png":
            from livecurve.errors import OutputError
            raise OutputError(f"{out}: a snapshot is written as .png")
        with open_source(source, start_s=start) as src:
            session = PreviewSession(chain_path, src.info, controls=controls, exact=exact,
                                     monitors=monitors, drift=drift, speedup=speedup)
            fr = src.read()
            if fr is None:
                raise MediaError(f"{src.info.path}: no frame to take a snapshot of")
            path = write_snapshot(session, fr, out, force=force)
        emit("snapshot", path=str(Path(path).resolve()), frame=fr.index, time_s=fr.time_s,
             **session.state())
        return 0
    require_display()
    import cv2
    set_qt_font_dir()   # before the first window (the wheel's own font folder is missing)
    with open_source(source, start_s=start, loop=True) as src:
        session = PreviewSession(chain_path, src.info, controls=controls, exact=exact,
                                 monitors=monitors, drift=drift, speedup=speedup)
        if planar and planar_ok(session):
            from livecurve.media.planes import PlaneClipSource, is_full_range
            src.close()
            session.in_legal = not is_full_range(src.info)
            with PlaneClipSource(src.info, start_s=start, loop=True) as psrc:
                session.in_bits = psrc.bits
                return _Player(cv2, session, psrc, max_frames=max_frames).run()
        return _Player(cv2, session, src, max_frames=max_frames).run()


def planar_ok(session: PreviewSession) -> bool:
    """True when the preview can run on the clip's own Y′CbCr planes (as a render would:
    :func:`livecurve.outputs.render._planar_layout`) — a chain reload that can no longer be
    fused (``--exact``, a per-pixel control) falls back per frame."""
    from livecurve.outputs.render import _planar_layout
    return session.info.kind == "clip" and _planar_layout(session.info, session.flow) is not None
