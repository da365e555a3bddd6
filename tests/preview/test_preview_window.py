"""The preview window on a real X server (Xvfb), driven by key presses from xdotool.

Each test starts its own Xvfb on a free display number (``-displayfd``), runs the
preview in a child process there, sends keys with xdotool (XTEST), follows the
``preview {json}`` state lines on stdout, and reads the X server's own framebuffer
with Xlib's ``XGetImage`` (libX11, X Window System protocol ``GetImage`` request) to
check what is really on the screen.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import json
import os
import queue
import subprocess
import threading
import time

import cv2
import numpy as np
import pytest

from livecurve.preview.keys import COARSE_STEPS, KnobScale
from livecurve.preview.overlay import CANVAS_H, CANVAS_W, PIC_H, PIC_W, TILE_H, TILE_W
from tests.conftest import require, require_exe
from tests.preview.test_preview_support import (
    REPO,
    bar_centres_in_canvas,
    make_clip,
    runner_cmd,
    write_bars,
    write_chain,
)

SCREEN = (1000, 1600)  # height, width of the virtual screen
TIMEOUT_S = 90.0       # generous: the machine may be busy; never a pass/fail criterion


@pytest.fixture
def xdisplay():
    """A fresh Xvfb; yields the environment for a child process on it."""
    xvfb = require_exe("Xvfb")
    require_exe("xdotool")
    r, w = os.pipe()
    proc = subprocess.Popen([xvfb, "-displayfd", str(w), "-screen", "0",
                             f"{SCREEN[1]}x{SCREEN[0]}x24", "-nolisten", "tcp"],
                            pass_fds=(w,), stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    os.close(w)
    try:
        with os.fdopen(r) as fh:
            number = fh.readline().strip()
        require(number.isdigit(), "a running Xvfb")
        env = dict(os.environ, DISPLAY=f":{number}")
        env.pop("QT_QPA_PLATFORM", None)
        env.pop("WAYLAND_DISPLAY", None)
        yield env
    finally:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()


class Preview:
    """A preview child process and its state lines."""

    def __init__(self, env, cwd, **kw):
        self.env = env
        self.proc = subprocess.Popen(runner_cmd(**kw), env=env, cwd=cwd, text=True,
                                     stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        self.events: queue.Queue = queue.Queue()
        self.seen: list[dict] = []
        self.err: list[str] = []
        threading.Thread(target=self._read, daemon=True).start()
        threading.Thread(target=lambda: self.err.extend(self.proc.stderr), daemon=True).start()
        self.window = None

    def _read(self):
        for line in self.proc.stdout:
            if line.startswith("preview "):
                self.events.put(json.loads(line[8:]))

    def wait(self, pred, what: str, timeout: float = TIMEOUT_S) -> dict:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            try:
                ev = self.events.get(timeout=0.2)
            except queue.Empty:
                if self.proc.poll() is not None and self.events.empty():
                    break
                continue
            self.seen.append(ev)
            if pred(ev):
                return ev
        raise AssertionError(f"no {what}; seen {[e['event'] for e in self.seen]}; "
                             f"stderr: {''.join(self.err)[-2000:]}")

    def ready(self) -> dict:
        ev = self.wait(lambda e: e["event"] == "ready", "ready line")
        out = subprocess.run(["xdotool", "search", "--sync", "--onlyvisible", "--name",
                              ev["title"]], env=self.env, capture_output=True, text=True,
                             timeout=30)
        self.window = out.stdout.split()[0]
        # Handshake: focus the window and press a harmless key until its state line
        # comes back (a window just mapped may not take keys at once), then undo it.
        for _attempt in range(20):
            subprocess.run(["xdotool", "windowfocus", "--sync", self.window], env=self.env,
                           check=True, timeout=30)
            subprocess.run(["xdotool", "key", "h"], env=self.env, check=True, timeout=30)
            try:
                got = self.wait(lambda e: e["event"] == "key" and e["action"] == "help",
                                "help key", timeout=3.0)
            except AssertionError:
                continue
            if got["help"]:
                self.key("h", "help")
            return ev
        raise AssertionError("the preview window never took a key")

    def key(self, name: str, action: str | None = None) -> dict | None:
        subprocess.run(["xdotool", "key", name], env=self.env, check=True, timeout=30)
        if action is None:
            return None
        return self.wait(lambda e: e["event"] == "key" and e["action"] == action,
                         f"state line for '{action}'")

    def snapshot(self) -> np.ndarray:
        subprocess.run(["xdotool", "key", "p"], env=self.env, check=True, timeout=30)
        ev = self.wait(lambda e: e["event"] == "snapshot", "snapshot line")
        img = cv2.imread(ev["path"], cv2.IMREAD_UNCHANGED)
        assert img is not None and img.shape == (CANVAS_H, CANVAS_W, 3)
        return img

    def quit(self) -> dict:
        self.key("q")
        ev = self.wait(lambda e: e["event"] == "end", "end line")
        assert self.proc.wait(60) == 0, "".join(self.err)
        return ev

    def close(self):
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(10)


class _XImage(ctypes.Structure):  # leading fields of Xlib's XImage (Xlib.h)
    _fields_ = [("width", ctypes.c_int), ("height", ctypes.c_int), ("xoffset", ctypes.c_int),
                ("format", ctypes.c_int), ("data", ctypes.c_void_p),
                ("byte_order", ctypes.c_int), ("bitmap_unit", ctypes.c_int),
                ("bitmap_bit_order", ctypes.c_int), ("bitmap_pad", ctypes.c_int),
                ("depth", ctypes.c_int), ("bytes_per_line", ctypes.c_int),
                ("bits_per_pixel", ctypes.c_int), ("red_mask", ctypes.c_ulong),
                ("green_mask", ctypes.c_ulong), ("blue_mask", ctypes.c_ulong)]


def grab_screen(display: str) -> np.ndarray:
    """The whole X screen as B′G′R′ uint8 (XGetImage of the root window, ZPixmap)."""
    x = ctypes.CDLL(ctypes.util.find_library("X11") or "libX11.so.6")
    x.XOpenDisplay.restype = ctypes.c_void_p
    x.XOpenDisplay.argtypes = [ctypes.c_char_p]
    x.XDefaultRootWindow.restype = ctypes.c_ulong
    x.XDefaultRootWindow.argtypes = [ctypes.c_void_p]
    x.XGetImage.restype = ctypes.POINTER(_XImage)
    x.XGetImage.argtypes = [ctypes.c_void_p, ctypes.c_ulong, ctypes.c_int, ctypes.c_int,
                            ctypes.c_uint, ctypes.c_uint, ctypes.c_ulong, ctypes.c_int]
    x.XFree.argtypes = [ctypes.c_void_p]
    x.XCloseDisplay.argtypes = [ctypes.c_void_p]
    d = x.XOpenDisplay(display.encode())
    assert d, f"cannot open {display}"
    try:
        h, w = SCREEN
        all_planes, zpixmap = ctypes.c_ulong(-1).value, 2   # Xlib.h: AllPlanes, ZPixmap
        p = x.XGetImage(d, x.XDefaultRootWindow(d), 0, 0, w, h, all_planes, zpixmap)
        im = p.contents
        assert im.bits_per_pixel == 32 and im.red_mask == 0xFF0000 and im.byte_order == 0
        raw = ctypes.string_at(im.data, im.bytes_per_line * im.height)
        x.XFree(im.data)
        x.XFree(p)
    finally:
        x.XCloseDisplay(d)
    rows = np.frombuffer(raw, np.uint8).reshape(h, -1)[:, :w * 4]
    return np.ascontiguousarray(rows.reshape(h, w, 4)[:, :, :3])   # B, G, R, pad (LSB first)


def find_on_screen(screen: np.ndarray, img: np.ndarray):
    """Top-left (y, x) where *img* sits on *screen* exactly, or None.

    The status panel (bottom right) is left out of the comparison: after a snapshot the
    window redraws it with a note naming the file written.
    """
    py, px = CANVAS_H - TILE_H, CANVAS_W - 2 * TILE_W    # the alarm numbers: unique text
    patch = img[py:py + TILE_H, px:px + TILE_W]
    res = cv2.matchTemplate(screen, patch, cv2.TM_SQDIFF)
    _, _, (x, y), _ = cv2.minMaxLoc(res)
    y0, x0 = y - py, x - (CANVAS_W - 2 * TILE_W)
    if y0 < 0 or x0 < 0 or y0 + CANVAS_H > screen.shape[0] or x0 + CANVAS_W > screen.shape[1]:
        return None
    shown = screen[y0:y0 + CANVAS_H, x0:x0 + CANVAS_W].copy()
    want = img.copy()
    shown[py:, CANVAS_W - TILE_W:] = want[py:, CANVAS_W - TILE_W:] = 0
    return (y0, x0) if np.array_equal(shown, want) else None


def _bars(img):
    row, cols = bar_centres_in_canvas()
    return np.array([img[row, c, 2] for c in cols], dtype=int)  # R′ of each bar


def test_keys_bypass_knob_snapshot_and_screen(xdisplay, tmp_path):
    chain = write_chain(tmp_path / "chain.toml")
    still = write_bars(tmp_path / "bars.png")
    pv = Preview(xdisplay, tmp_path, chain_path=str(chain), source=str(still))
    try:
        ev = pv.ready()
        assert (ev["width"], ev["height"]) == (CANVAS_W, CANVAS_H)
        assert pv.key("space", "pause")["paused"] is True
        a = pv.snapshot()
        assert pv.key("b", "bypass")["bypass"] is True
        b = pv.snapshot()
        assert pv.key("b", "bypass")["bypass"] is False
        # bypassed, the window shows the still's own codes; processed, the gain about
        # mid-grey moves the dark and light bars apart
        np.testing.assert_array_equal(_bars(b), [0, 64, 128, 192, 255, 255])
        assert _bars(a)[1] < 64 and _bars(a)[3] > 192
        # one coarse step up on the logarithmic slider of gain_r (100 Ω … 20 kΩ)
        want = KnobScale(100.0, 20e3).step(2e3, COARSE_STEPS)
        ev = pv.key("equal", "coarse_up")
        assert ev["knob"] == "gain_r" and ev["wanted"]["gain_r"] == pytest.approx(want)
        pv.wait(lambda e: e["event"] == "knobs"
                and e.get("live", {}).get("gain_r") == pytest.approx(want), "rebuilt knob")
        c = pv.snapshot()
        assert _bars(c)[1] < _bars(a)[1] and _bars(c)[3] > _bars(a)[3]   # more gain
        # the X server's framebuffer holds exactly the composite just written
        end = time.monotonic() + 20
        where = None
        while where is None and time.monotonic() < end:
            screen = grab_screen(xdisplay["DISPLAY"])
            where = find_on_screen(screen, c)
            time.sleep(0.2)
        assert where is not None, "the window's picture is not on the screen"
        assert screen.std() > 10
        # a click on the slider's groove right of its handle moves it up by whole
        # positions (the groove's height depends on Qt's style: try rows below the picture)
        ev = None
        for dy in range(2, 22, 2):
            subprocess.run(["xdotool", "mousemove", str(where[1] + CANVAS_W - 40),
                            str(where[0] + CANVAS_H + dy), "click", "1"], env=pv.env,
                           check=True, timeout=30)
            try:
                ev = pv.wait(lambda e: e["event"] == "slider", "slider line", timeout=2.0)
                break
            except AssertionError:
                continue
        assert ev is not None, "no click reached the slider"
        scale = KnobScale(100.0, 20e3)
        pos = scale.to_pos(ev["moved"]["gain_r"])
        assert pos > scale.to_pos(want) and abs(pos - round(pos)) < 1e-6
        pv.wait(lambda e: e["event"] == "knobs"
                and e["live"]["gain_r"] == pytest.approx(ev["moved"]["gain_r"]), "rebuilt knob")
        ev = pv.key("h", "help")           # keys still reach the window after the click
        assert ev["help"] is True
        ev = pv.quit()
        assert ev["frames_shown"] >= 1
    finally:
        pv.close()


def test_hot_reload_and_bad_edit(xdisplay, tmp_path):
    chain = write_chain(tmp_path / "chain.toml", "2k")
    still = write_bars(tmp_path / "bars.png")
    pv = Preview(xdisplay, tmp_path, chain_path=str(chain), source=str(still))
    try:
        pv.ready()
        pv.key("space", "pause")
        a = pv.snapshot()
        write_chain(chain, "8k", title="edited")
        ev = pv.wait(lambda e: e["event"] == "reload", "reload line")
        assert ev["ok"] is True and ev["title"] == "edited" and ev["live"]["gain_r"] == 8e3
        b = pv.snapshot()
        assert _bars(b)[1] < _bars(a)[1] and _bars(b)[3] > _bars(a)[3]
        chain.write_text('title = "half written\n[[stage]]\n', encoding="utf-8")
        ev = pv.wait(lambda e: e["event"] == "reload", "reload line")
        assert ev["ok"] is False and str(chain) in ev["error"]
        c = pv.snapshot()
        np.testing.assert_array_equal(_bars(c), _bars(b))        # last good chain kept
        assert c[:PIC_H, :PIC_W].tobytes() != b[:PIC_H, :PIC_W].tobytes()   # error shown
        write_chain(chain, "2k", title="fixed")
        ev = pv.wait(lambda e: e["event"] == "reload", "reload line")
        assert ev["ok"] is True and ev["title"] == "fixed"
        d = pv.snapshot()
        np.testing.assert_array_equal(_bars(d), _bars(a))
        pv.quit()
    finally:
        pv.close()


def test_clip_plays_to_a_frame_limit(xdisplay, tmp_path):
    chain = write_chain(tmp_path / "chain.toml")
    clip = make_clip(tmp_path / "clip.mp4", seconds=2.0, fps=25, size="320x180")
    pv = Preview(xdisplay, tmp_path, chain_path=str(chain), source=str(clip), max_frames=30)
    try:
        ev = pv.wait(lambda e: e["event"] == "end", "end line")
        assert ev["frames_shown"] == 30 and ev["dropped"] >= 0
        assert pv.proc.wait(60) == 0
    finally:
        pv.close()


def test_step_loop_off_ends_and_space_plays_again(xdisplay, tmp_path):
    chain = write_chain(tmp_path / "chain.toml")
    clip = make_clip(tmp_path / "clip.mp4", seconds=0.4, fps=25)    # 10 frames
    pv = Preview(xdisplay, tmp_path, chain_path=str(chain), source=str(clip))
    try:
        pv.ready()
        assert pv.key("space", "pause")["paused"] is True
        pv.key("p")
        fa = pv.wait(lambda e: e["event"] == "snapshot", "snapshot line")["frame"]
        assert pv.key("n", "step")["paused"] is True
        pv.key("p")
        fb = pv.wait(lambda e: e["event"] == "snapshot", "snapshot line")["frame"]
        assert fb == (fa + 1) % 10                      # the next frame, on a looping clip
        assert pv.key("space", "pause")["paused"] is False
        assert pv.key("l", "loop")["loop"] is False
        pv.wait(lambda e: e["event"] == "ended", "end of the clip")
        ev = pv.key("space", "pause")
        assert ev["ended"] is False and ev["paused"] is False
        pv.wait(lambda e: e["event"] == "ended", "end of the second pass")
        pv.quit()
    finally:
        pv.close()


def test_offscreen_platform_is_refused_without_abort(xdisplay, tmp_path):
    env = dict(xdisplay, QT_QPA_PLATFORM="offscreen")
    chain = write_chain(tmp_path / "chain.toml")
    still = write_bars(tmp_path / "bars.png")
    r = subprocess.run(runner_cmd(chain_path=str(chain), source=str(still)), env=env,
                       cwd=REPO, capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "--snapshot" in r.stderr and "offscreen" in r.stderr


def test_display_check_accepts_the_virtual_display(xdisplay):
    from livecurve.preview.window import display_problem
    assert display_problem(xdisplay) is None
    assert grab_screen(xdisplay["DISPLAY"]).shape == SCREEN + (3,)
