"""Turning the preview: key bindings, the window's sliders and their scale, and rebuilding
the chain's tables off the window thread when a parameter turns or the chain file changes.

Keys are livecurve's own choices: plain characters that reach the window the same way on
every keyboard layout OpenCV's window backends deliver (``cv2.waitKeyEx`` returns the
character code).  The arrow keys are extra aliases; their codes are the X11 keysyms
(``XK_Left`` = 0xFF51 … ``XK_Down`` = 0xFF54, X Window System protocol, ``keysymdef.h``),
which is what OpenCV's Qt backend returns on Linux.  Modifier keys on their own
(Shift, Control, …: keysyms 0xFFE1…0xFFEE) are ignored.

Slider scale
    A live parameter with range ``lo … hi`` is shown as a slider of
    ``0 … SLIDER_MAX`` positions.  When ``lo > 0`` and ``hi / lo > LOG_RATIO`` the scale
    is logarithmic, ``value = lo · (hi/lo)^(pos/SLIDER_MAX)`` (equal ratios per step, the
    way a reverse-log pot or a decade of current behaves); otherwise it is linear,
    ``value = lo + (hi − lo) · pos/SLIDER_MAX``.  The keys turn a parameter by whole
    slider positions: :data:`FINE_STEPS` or :data:`COARSE_STEPS` at a time.

Rebuilds
    Turning a parameter rebuilds the tables of the runs that hold it
    (``FrameEngine.set_live``), which takes from milliseconds to seconds.  The
    :class:`Rebuilder` does it on a worker thread, on a *copy* of the engine
    (:func:`engine_with`), and hands the copy back to be swapped in between two frames;
    requests made meanwhile are merged, so the window never queues stale builds.
"""

from __future__ import annotations

import copy
import math
import queue
import threading
import time
from dataclasses import dataclass

from livecurve.errors import ConfigError, LivecurveError

#: Positions of a live parameter's slider (0 … SLIDER_MAX).
SLIDER_MAX = 1000
#: Above this hi/lo ratio (with lo > 0) a slider is logarithmic.
LOG_RATIO = 10.0
#: Slider positions per fine / coarse key press.
FINE_STEPS = 2
COARSE_STEPS = 50

# X11 keysyms (keysymdef.h) of the arrow keys, as OpenCV's Qt backend reports them.
_XK_LEFT, _XK_UP, _XK_RIGHT, _XK_DOWN = 0xFF51, 0xFF52, 0xFF53, 0xFF54
# X11 keysyms of modifier keys alone (Shift_L … Hyper_R).
_XK_MODIFIERS = range(0xFFE1, 0xFFEF)


@dataclass(frozen=True)
class Binding:
    """One action of the preview window and the keys that trigger it.

    Attributes
    ----------
    action : str
        Name the preview loop dispatches on.
    keys : tuple of int
        Key codes as ``cv2.waitKeyEx`` returns them.
    label : str
        How the keys are written in the help overlay and the README.
    text : str
        What the action does.
    """

    action: str
    keys: tuple
    label: str
    text: str


def _c(*chars: str) -> tuple:
    return tuple(ord(ch) for ch in chars)


#: Every binding of the preview window, in the order the help overlay lists them.
BINDINGS: tuple[Binding, ...] = (
    Binding("pause", _c(" "), "space", "pause / play (plays again from the start at the end)"),
    Binding("step", _c("n"), "n", "show the next frame and stay paused"),
    Binding("loop", _c("l"), "l", "loop the clip on / off"),
    Binding("bypass", _c("b"), "b", "bypass the chain (show the source through the converters)"),
    Binding("split", _c("s"), "s", "split view: source on the left, processed on the right"),
    Binding("waveform", _c("1"), "1", "waveform monitor on / off"),
    Binding("vectorscope", _c("2"), "2", "vectorscope on / off"),
    Binding("transfer", _c("3"), "3", "transfer view on / off"),
    Binding("alarms", _c("4"), "4", "level-alarm numbers on / off"),
    Binding("zebra", _c("z"), "z", "zebra stripes over out-of-legal and clipped pixels"),
    Binding("next_knob", _c("]"), "]", "select the next live parameter"),
    Binding("prev_knob", _c("["), "[", "select the previous live parameter"),
    Binding("coarse_up", _c("=", "+") + (_XK_UP,), "= or + (Up)",
            f"turn the selected parameter up by {COARSE_STEPS} slider steps"),
    Binding("coarse_down", _c("-", "_") + (_XK_DOWN,), "- (Down)",
            f"turn it down by {COARSE_STEPS} slider steps"),
    Binding("fine_up", _c(".", ">") + (_XK_RIGHT,), ". (Right)",
            f"turn it up by {FINE_STEPS} slider steps"),
    Binding("fine_down", _c(",", "<") + (_XK_LEFT,), ", (Left)",
            f"turn it down by {FINE_STEPS} slider steps"),
    Binding("reset", _c("r"), "r", "reset every live parameter to the chain file's value"),
    Binding("snapshot", _c("p"), "p", "write what the window shows to a PNG in this folder"),
    Binding("help", _c("h", "?"), "h or ?", "show / hide this list"),
    Binding("quit", _c("q") + (27,), "q or Esc", "quit"),
)

_BY_CODE: dict[int, str] = {}
for _b in BINDINGS:
    for _k in _b.keys:
        if _k in _BY_CODE:  # pragma: no cover - guarded by a test as well
            raise RuntimeError(f"key code {_k} bound twice")
        _BY_CODE[_k] = _b.action

#: Action names, in binding order.
ACTIONS = tuple(b.action for b in BINDINGS)


def action_for(code: int) -> str | None:
    """The action of a key code from ``cv2.waitKeyEx`` (None: no key, or not bound).

    Parameters
    ----------
    code : int
        -1 when no key was pressed; a character code (possibly with modifier bits above
        the low 16 bits on some backends); or an X11 keysym for the arrow keys.
    """
    code = int(code)
    if code < 0 or code in _XK_MODIFIERS:
        return None
    if code in _BY_CODE:
        return _BY_CODE[code]
    low = code & 0xFFFF  # drop modifier flags some backends put above the key code
    if low in _BY_CODE:
        return _BY_CODE[low]
    return None


def help_lines() -> list[str]:
    """One line per binding: keys, then what they do."""
    width = max(len(b.label) for b in BINDINGS)
    return [f"{b.label:<{width}}  {b.text}" for b in BINDINGS]


class KnobScale:
    """Slider scale of one live parameter (see the module docstring).

    Parameters
    ----------
    lo, hi : float
        The parameter's range in its SI unit (``hi > lo``).
    """

    def __init__(self, lo: float, hi: float):
        lo, hi = float(lo), float(hi)
        if not (math.isfinite(lo) and math.isfinite(hi) and hi > lo):
            raise ConfigError("a live parameter's range must be finite with max above min",
                              key="live", value=(lo, hi))
        self.lo, self.hi = lo, hi
        self.log = lo > 0 and hi / lo > LOG_RATIO

    def to_pos(self, value: float) -> float:
        """Slider position (float, 0 … SLIDER_MAX) of *value*, clamped to the range."""
        v = min(max(float(value), self.lo), self.hi)
        if self.log:
            u = math.log(v / self.lo) / math.log(self.hi / self.lo)
        else:
            u = (v - self.lo) / (self.hi - self.lo)
        return SLIDER_MAX * u

    def to_value(self, pos: float) -> float:
        """Parameter value at slider position *pos* (clamped to 0 … SLIDER_MAX)."""
        u = min(max(float(pos), 0.0), float(SLIDER_MAX)) / SLIDER_MAX
        if self.log:
            return self.lo * (self.hi / self.lo) ** u
        return self.lo + (self.hi - self.lo) * u

    def step(self, value: float, steps: int) -> float:
        """*value* moved by *steps* whole slider positions (from the nearest position)."""
        pos = round(self.to_pos(value)) + int(steps)
        return self.to_value(min(max(pos, 0), SLIDER_MAX))


# ---- the window's sliders -------------------------------------------------------------------
class SliderWindow:
    """The OpenCV window, with one slider (trackbar) per live parameter of the session.

    Parameters
    ----------
    cv2 : module
        OpenCV, imported by the caller once a display is known to exist.
    title : str
        Window name (also its title).
    session : livecurve.preview.window.PreviewSession
        Whose knobs the sliders show and set.

    Attributes
    ----------
    slider_moved : list of str
        Knobs the user moved by slider since the list was last cleared.
    """

    def __init__(self, cv2, title: str, session):
        self.cv2, self.title, self.session = cv2, title, session
        self._setting = False
        self._names: list[str] = []
        self.slider_moved: list[str] = []
        self.open()

    def open(self) -> None:
        cv2 = self.cv2
        cv2.namedWindow(self.title, cv2.WINDOW_AUTOSIZE | cv2.WINDOW_GUI_NORMAL)
        self._names = self.session.knob_names()
        self._setting = True
        try:
            for name in self._names:
                cv2.createTrackbar(name, self.title, 0, SLIDER_MAX,
                                   lambda pos, n=name: self._moved(n, pos))
        finally:
            self._setting = False
        self.sync()

    def reopen_if_knobs_changed(self) -> None:
        """Make the window again when a reloaded chain has other knobs (OpenCV cannot
        remove a slider)."""
        if self.session.knob_names() != self._names:
            self.cv2.destroyWindow(self.title)
            self.open()

    def _moved(self, name: str, pos: int) -> None:
        if self._setting or name not in self.session.spec.live:
            return
        ls = self.session.spec.live[name]
        if self.session.driven_by(name):
            self.sync()
            return
        self.session.set_knob(name, KnobScale(ls.lo, ls.hi).to_value(pos))
        self.session.selected = self._names.index(name)
        self.slider_moved.append(name)

    def sync(self) -> None:
        """Put every slider where its knob is."""
        self._setting = True
        try:
            for name in self._names:
                ls = self.session.spec.live[name]
                pos = round(KnobScale(ls.lo, ls.hi).to_pos(self.session.wanted[name]))
                self.cv2.setTrackbarPos(name, self.title, int(pos))
        finally:
            self._setting = False

    def show(self, canvas) -> None:
        """Show a B′G′R′ image."""
        self.cv2.imshow(self.title, canvas)

    def closed(self) -> bool:
        """The user closed the window."""
        try:
            return self.cv2.getWindowProperty(self.title, self.cv2.WND_PROP_VISIBLE) < 1
        except Exception:  # noqa: BLE001 - a destroyed window raises in some backends
            return True



# ---- rebuilding off the window thread -------------------------------------------------------
def engine_with(engine, live: dict):
    """A copy of *engine* with knobs turned to *live* (name → value); *engine* is untouched.

    Only the runs holding a changed knob are rebuilt (``FrameEngine.set_live``); names the
    chain does not have are ignored and values outside a knob's range are clamped to it.
    """
    new = copy.copy(engine)
    new.state = copy.deepcopy(engine.state)
    new.runs = [[copy.copy(r) for r in rs] for rs in engine.runs]
    for name, value in live.items():
        if name in new.spec.live and new.state.live.get(name) != value:
            new.set_live(name, value)
    return new


class Rebuilder:
    """One worker thread that rebuilds engines (knob turns) and frame flows (chain reloads).

    Knob values asked for while the worker is busy are merged, the newest value of each
    knob winning, and built in one go on a copy of the newest engine.  A reload request
    replaces them with the values to carry into the reloaded chain; when the reload fails
    those values are still applied to the chain in use.  Results arrive in
    :attr:`results`, in order, as ``(kind, object or None, error text or None)`` with
    *kind* ``"knobs"`` (a FrameEngine) or ``"reload"`` (a FrameFlow).

    Parameters
    ----------
    build_flow : callable
        ``build_flow(carry) -> FrameFlow``: loads the chain file and builds a flow with
        the knob values *carry* (name → value).
    engine : FrameEngine
        The engine in use when the worker starts.
    """

    def __init__(self, build_flow, engine):
        self._build_flow = build_flow
        self._base = engine
        self._cond = threading.Condition()
        self._wanted: dict = {}
        self._need_knobs = False
        self._need_reload = False
        self._busy = False
        self._reloading = False
        self._stop = False
        self.results: queue.SimpleQueue = queue.SimpleQueue()
        self._thread = threading.Thread(target=self._run, name="livecurve-rebuild", daemon=True)
        self._thread.start()

    @property
    def busy(self) -> bool:
        """A build is running or waiting."""
        with self._cond:
            return self._busy or self._need_knobs or self._need_reload

    def want_knobs(self, values: dict) -> None:
        """Turn knobs (name → value) on a copy of the newest engine."""
        with self._cond:
            self._wanted.update(values)
            self._need_knobs = True
            self._cond.notify_all()

    def want_reload(self, carry: dict) -> None:
        """Reload the chain file; *carry* holds the knob values the user has set."""
        with self._cond:
            self._wanted, self._need_reload = dict(carry), True
            self._cond.notify_all()

    def _run(self) -> None:
        while True:
            with self._cond:
                while not (self._stop or self._need_knobs or self._need_reload):
                    self._cond.wait()
                if self._stop:
                    return
                reload, wanted = self._need_reload, self._wanted
                self._wanted = {}
                self._need_reload = self._need_knobs = False
                self._busy, self._reloading = True, reload
            kind = "reload" if reload else "knobs"
            try:
                if reload:
                    obj = self._build_flow(wanted)
                    self._base = obj.engine
                else:
                    obj = self._base = engine_with(self._base, wanted)
                self.results.put((kind, obj, None))
            except Exception as exc:  # noqa: BLE001 - shown in the window, the loop goes on
                text = str(exc) if isinstance(exc, LivecurveError) else \
                    f"{type(exc).__name__}: {exc}"
                self.results.put((kind, None, text))
                live = self._base.state.live
                if reload and any(live.get(n) != v for n, v in wanted.items()):
                    self.want_knobs(wanted)  # keep the user's knobs on the chain in use
            with self._cond:
                self._busy = False
                self._cond.notify_all()

    def wait_knobs(self, timeout_s: float) -> bool:
        """Wait up to *timeout_s* for a knob build asked for (not a reload) to finish, so
        the next frame can show the turned knob instead of a stale one.  True when no knob
        build is running or waiting any more."""
        end = time.perf_counter() + max(0.0, timeout_s)
        with self._cond:
            while (self._need_knobs or (self._busy and not self._reloading)) \
                    and not self._need_reload and not self._stop:
                left = end - time.perf_counter()
                if left <= 0:
                    return False
                self._cond.wait(left)
            return True

    def close(self) -> None:
        """Stop the worker (a build in progress is abandoned with the thread)."""
        with self._cond:
            self._stop = True
            self._cond.notify_all()
        self._thread.join(timeout=0.1)
