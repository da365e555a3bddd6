"""Synthesise livecurve's demo clip: a fruit stall at a night market, with a soundtrack.

    python3 clips/make_demo_clip.py [--out clips/demo.mp4] [--force]

Everything is drawn procedurally with numpy and OpenCV from a fixed seed, so the
pictures and the sound are the same on every run (the bytes of the file may differ
between x264 builds).  Format: 1280×720, 30 frames/s, 6 s (180 frames), H.264 4:2:0
BT.709 limited range, with 48 kHz stereo AAC.

What the picture offers a circuit preview:

* smooth gradients (the night sky, lantern halos) where banding and curve kinks show;
* saturated colour (awning stripes, fruit, fairy lights, a red LED ticker) near the
  edges of the Y′CbCr gamut, for clipping and vectorscope work;
* skin tones over a range of lightness (a vendor and a customer);
* fine detail: a zone-plate poster (rings up to near the sampling limit), stars,
  thin chalk lettering, wheel spokes;
* sharp edges (rooftops, crate boards) for overshoot and slew-rate limits;
* motion: swaying lanterns, drifting steam, a passing bicycle with turning wheels,
  a scrolling ticker and slowly breathing fairy lights.  Nothing flashes: every
  brightness change is a smooth swell well below 3 Hz (mindful of ITU-R BT.1702).

The soundtrack is a kick drum on every beat at 120 beats per minute (beats at
0.0, 0.5, 1.0 … 5.5 s) and a bass line in eighth notes, for audio-driven modulation.
"""

from __future__ import annotations

import argparse
import math
import subprocess
import sys
import tempfile
from pathlib import Path

import cv2
import numpy as np
from scipy import signal

from livecurve.errors import LivecurveError
from livecurve.media import _ffmpeg
from livecurve.media.atomic import check_target
from livecurve.media.encode import ClipWriter

WIDTH, HEIGHT, FPS, SECONDS = 1280, 720, 30, 6.0
N_FRAMES = int(FPS * SECONDS)
AUDIO_RATE = 48_000
BPM = 120.0
SEED = 20240607
HORIZON_Y = 330
COUNTER_Y = 470
POT_X = 975


# ----------------------------------------------------------------------------- helpers
def _rgb(r, g, b) -> tuple[float, float, float]:
    """8-bit R′G′B′ → (B, G, R) floats 0…1 in OpenCV's channel order."""
    return (b / 255.0, g / 255.0, r / 255.0)


def _glow_sprite(radius: int, sigma: float) -> np.ndarray:
    """A Gaussian glow, shape (2r+1, 2r+1), peak 1."""
    y, x = np.mgrid[-radius:radius + 1, -radius:radius + 1].astype(np.float32)
    return np.exp(-(x * x + y * y) / (2.0 * sigma * sigma)).astype(np.float32)


def _add_sprite(img: np.ndarray, sprite: np.ndarray, cx: float, cy: float,
                colour: tuple[float, float, float], gain: float) -> None:
    """Add ``gain·colour·sprite`` centred at (cx, cy), clipped to the picture."""
    r = sprite.shape[0] // 2
    x0, y0 = int(round(cx)) - r, int(round(cy)) - r
    xs0, ys0 = max(0, -x0), max(0, -y0)
    xs1 = min(sprite.shape[1], img.shape[1] - x0)
    ys1 = min(sprite.shape[0], img.shape[0] - y0)
    if xs1 <= xs0 or ys1 <= ys0:
        return
    patch = sprite[ys0:ys1, xs0:xs1, None] * (gain * np.asarray(colour, np.float32))
    img[y0 + ys0:y0 + ys1, x0 + xs0:x0 + xs1] += patch


def _blend_sprite(img: np.ndarray, alpha: np.ndarray, cx: float, cy: float,
                  colour: tuple[float, float, float], opacity: float) -> None:
    """Alpha-blend a flat colour through a soft mask centred at (cx, cy)."""
    r = alpha.shape[0] // 2
    x0, y0 = int(round(cx)) - r, int(round(cy)) - r
    xs0, ys0 = max(0, -x0), max(0, -y0)
    xs1 = min(alpha.shape[1], img.shape[1] - x0)
    ys1 = min(alpha.shape[0], img.shape[0] - y0)
    if xs1 <= xs0 or ys1 <= ys0:
        return
    a = alpha[ys0:ys1, xs0:xs1, None] * opacity
    region = img[y0 + ys0:y0 + ys1, x0 + xs0:x0 + xs1]
    region *= 1.0 - a
    region += a * np.asarray(colour, np.float32)


def _text(img: np.ndarray, text: str, org: tuple[int, int], font: int, scale: float,
          colour: tuple[float, float, float], thickness: int = 1) -> None:
    """Anti-aliased text on a float picture (OpenCV draws text on 8-bit pictures only)."""
    mask = np.zeros(img.shape[:2], np.uint8)
    cv2.putText(mask, text, org, font, scale, 255, thickness, cv2.LINE_AA)
    ys, xs = np.nonzero(mask)
    if ys.size == 0:
        return
    y0, y1, x0, x1 = ys.min(), ys.max() + 1, xs.min(), xs.max() + 1
    a = mask[y0:y1, x0:x1, None].astype(np.float32) / 255.0
    region = img[y0:y1, x0:x1]
    region *= 1.0 - a
    region += a * np.asarray(colour, np.float32)


# ----------------------------------------------------------------------------- still layers
def _sky(img: np.ndarray, rng: np.random.Generator) -> None:
    """Night sky: navy at the top, violet, a warm city glow at the horizon; stars; moon."""
    y = np.linspace(0.0, 1.0, HORIZON_Y, dtype=np.float32)[:, None]
    top, mid, low = (np.array(_rgb(*c), np.float32) for c in ((8, 12, 38), (52, 30, 84),
                                                               (196, 104, 58)))
    w_mid = np.clip(y / 0.6, 0, 1)
    w_low = np.clip((y - 0.6) / 0.4, 0, 1) ** 1.5
    grad = top * (1 - w_mid[..., None]) + mid * w_mid[..., None]
    grad = grad * (1 - w_low[..., None]) + low * w_low[..., None]
    img[:HORIZON_Y] = grad
    n = 140
    xs = rng.integers(0, WIDTH, n)
    ys = rng.integers(0, int(HORIZON_Y * 0.65), n)
    level = rng.uniform(0.35, 1.0, n)
    for x, yy, v in zip(xs, ys, level, strict=True):
        img[yy, x] = np.maximum(img[yy, x], v)
        if v > 0.85:  # the brightest stars get a 1-pixel cross
            for dx, dy in ((1, 0), (-1, 0), (0, 1), (0, -1)):
                if 0 <= x + dx < WIDTH and 0 <= yy + dy < HORIZON_Y:
                    img[yy + dy, x + dx] = np.maximum(img[yy + dy, x + dx], 0.5 * v)
    moon = np.zeros_like(img)
    cv2.circle(moon, (1105, 82), 34, _rgb(250, 247, 232), -1, cv2.LINE_AA)
    cv2.circle(moon, (1094, 76), 7, _rgb(215, 212, 200), -1, cv2.LINE_AA)
    cv2.circle(moon, (1117, 96), 5, _rgb(222, 219, 206), -1, cv2.LINE_AA)
    mask = moon.max(axis=2, keepdims=True) > 0
    np.copyto(img, moon, where=mask)
    _add_sprite(img, _glow_sprite(110, 40.0), 1105, 82, _rgb(120, 120, 140), 0.35)


def _skyline(img: np.ndarray, rng: np.random.Generator) -> None:
    """Flat-roofed buildings against the glow, some windows lit: hard edges."""
    x = 0
    while x < WIDTH:
        w = int(rng.integers(60, 150))
        h = int(rng.integers(70, 200))
        top = HORIZON_Y - h
        shade = float(rng.uniform(0.05, 0.11))
        cv2.rectangle(img, (x, top), (x + w, HORIZON_Y + 5), (shade * 1.2, shade, shade), -1)
        for wy in range(top + 12, HORIZON_Y - 10, 22):
            for wx in range(x + 10, x + w - 14, 20):
                if rng.random() < 0.28:
                    warm = _rgb(int(rng.integers(200, 256)), int(rng.integers(150, 210)), 70)
                    cv2.rectangle(img, (wx, wy), (wx + 8, wy + 11), warm, -1)
        x += w + int(rng.integers(0, 20))


def _street(img: np.ndarray, rng: np.random.Generator) -> None:
    """Asphalt below the horizon: a dark gradient with fixed, softened grain."""
    h = HEIGHT - HORIZON_Y
    y = np.linspace(0.0, 1.0, h, dtype=np.float32)[:, None, None]
    base = np.array(_rgb(34, 30, 36), np.float32) * (1 - 0.5 * y) + \
        np.array(_rgb(18, 16, 20), np.float32) * (0.5 * y)
    grain = rng.normal(0.0, 1.0, (h, WIDTH)).astype(np.float32)
    grain = cv2.GaussianBlur(grain, (0, 0), 1.2) * 0.02
    img[HORIZON_Y:] = base + grain[..., None]


def _zone_plate(size: int) -> np.ndarray:
    """Circular zone plate cos(π·r²/(2·R)) in grey 0.1…0.9: the ring frequency rises
    linearly with radius and reaches half a cycle per pixel at the rim."""
    c = (size - 1) / 2.0
    y, x = np.mgrid[0:size, 0:size].astype(np.float64)
    r2 = (x - c) ** 2 + (y - c) ** 2
    k = math.pi / (2.0 * c)  # local frequency = k·r/π cycles/pixel → 0.5 at r = c
    v = np.where(r2 <= c * c, 0.5 + 0.4 * np.cos(k * r2), 0.5)
    return v.astype(np.float32)


def _stall(img: np.ndarray, rng: np.random.Generator) -> None:
    """Counter, posts, awning, chalkboard, zone-plate poster, fruit crates, cooking pot."""
    # posts and counter
    for px in (150, 1032):
        cv2.rectangle(img, (px, 170), (px + 18, 650), _rgb(92, 58, 32), -1)
    cv2.rectangle(img, (130, COUNTER_Y), (1050, 660), _rgb(120, 74, 40), -1)
    for yy in range(COUNTER_Y + 30, 660, 30):  # plank joints: thin dark lines
        cv2.line(img, (130, yy), (1050, yy), _rgb(60, 36, 20), 1, cv2.LINE_AA)
    for xx in range(130, 1050, 115):
        cv2.line(img, (xx, COUNTER_Y), (xx, 660), _rgb(70, 42, 24), 2, cv2.LINE_AA)
    cv2.rectangle(img, (120, COUNTER_Y - 12), (1060, COUNTER_Y + 4), _rgb(150, 96, 54), -1)
    # awning: saturated stripes with a scalloped hem
    stripes = [_rgb(225, 20, 30), _rgb(250, 240, 225), _rgb(20, 170, 60),
               _rgb(250, 240, 225), _rgb(240, 200, 0), _rgb(250, 240, 225),
               _rgb(30, 60, 210), _rgb(250, 240, 225), _rgb(200, 20, 160),
               _rgb(250, 240, 225), _rgb(0, 190, 200)]
    x0, x1, y0, y1 = 110, 1070, 150, 215
    sw = (x1 - x0) / len(stripes)
    for i, col in enumerate(stripes):
        a, b = int(x0 + i * sw), int(x0 + (i + 1) * sw)
        cv2.rectangle(img, (a, y0), (b, y1), col, -1)
        cv2.ellipse(img, ((a + b) // 2, y1), ((b - a) // 2, 18), 0, 0, 180, col, -1,
                    cv2.LINE_AA)
    cv2.rectangle(img, (x0 - 10, y0 - 14), (x1 + 10, y0), _rgb(70, 40, 24), -1)
    # chalkboard with thin lettering (invented prices)
    cv2.rectangle(img, (1075, 300), (1255, 470), _rgb(60, 44, 30), -1)
    cv2.rectangle(img, (1085, 310), (1245, 460), _rgb(22, 38, 30), -1)
    chalk = _rgb(235, 235, 225)
    font = cv2.FONT_HERSHEY_SIMPLEX
    for i, line in enumerate(("FRUIT & TEA", "plums   4.50", "figs    3.20",
                              "tea     1.10", "open till 2")):
        _text(img, line, (1094, 336 + 27 * i), font, 0.47, chalk)
    # zone-plate poster on the left post
    zp = _zone_plate(150)
    img[250:400, 20:170] = zp[..., None]
    cv2.rectangle(img, (18, 248), (171, 401), _rgb(200, 200, 200), 1)
    # crates of fruit on the counter
    fruits = [(200, (255, 140, 0), 15), (315, (120, 200, 20), 11), (618, (110, 20, 120), 8),
              (880, (210, 20, 30), 14)]
    for cx0, col, radius in fruits:
        cv2.rectangle(img, (cx0 - 55, COUNTER_Y - 70), (cx0 + 55, COUNTER_Y - 12),
                      _rgb(160, 112, 60), -1)
        for yy in (COUNTER_Y - 50, COUNTER_Y - 30):
            cv2.line(img, (cx0 - 55, yy), (cx0 + 55, yy), _rgb(100, 66, 34), 2)
        for _ in range(14):
            fx = cx0 + int(rng.integers(-45, 46))
            fy = COUNTER_Y - 70 - int(rng.integers(-4, 14))
            dark = tuple(0.55 * c for c in col)
            cv2.circle(img, (fx, fy), radius, _rgb(*dark), -1, cv2.LINE_AA)
            cv2.circle(img, (fx - 2, fy - 2), radius - 3, _rgb(*col), -1, cv2.LINE_AA)
            cv2.circle(img, (fx - radius // 3, fy - radius // 3), max(2, radius // 4),
                       _rgb(*(min(255, c + 70) for c in col)), -1, cv2.LINE_AA)
    # cooking pot on a brazier, right end of the counter
    cv2.rectangle(img, (POT_X - 42, COUNTER_Y - 75), (POT_X + 42, COUNTER_Y - 14),
                  _rgb(40, 40, 44), -1)
    cv2.ellipse(img, (POT_X, COUNTER_Y - 75), (44, 10), 0, 0, 360, _rgb(70, 70, 76), -1,
                cv2.LINE_AA)
    _add_sprite(img, _glow_sprite(40, 14.0), POT_X, COUNTER_Y - 10, _rgb(255, 90, 10), 0.6)


def _person(img: np.ndarray, cx: int, skin, shirt, hair, *, head_y: int, scale: float) -> None:
    """A stylised figure behind/at the counter: shoulders, neck, face, hair, hands."""
    s = scale
    cv2.ellipse(img, (cx, int(head_y + 120 * s)), (int(70 * s), int(60 * s)), 0, 180, 360,
                _rgb(*shirt), -1, cv2.LINE_AA)
    cv2.rectangle(img, (int(cx - 70 * s), int(head_y + 118 * s)),
                  (int(cx + 70 * s), COUNTER_Y - 12), _rgb(*shirt), -1)
    cv2.rectangle(img, (int(cx - 14 * s), int(head_y + 40 * s)),
                  (int(cx + 14 * s), int(head_y + 70 * s)), _rgb(*(0.85 * c for c in skin)),
                  -1)
    cv2.ellipse(img, (cx, head_y), (int(34 * s), int(44 * s)), 0, 0, 360, _rgb(*skin), -1,
                cv2.LINE_AA)
    cv2.ellipse(img, (cx, int(head_y - 18 * s)), (int(36 * s), int(30 * s)), 0, 180, 360,
                _rgb(*hair), -1, cv2.LINE_AA)
    for dx in (-12, 12):  # eyes
        cv2.circle(img, (int(cx + dx * s), int(head_y - 2 * s)), max(1, int(3 * s)),
                   _rgb(30, 22, 20), -1, cv2.LINE_AA)
    for dx in (-58, 58):  # hands on the counter
        cv2.ellipse(img, (int(cx + dx * s), COUNTER_Y - 14), (int(15 * s), int(9 * s)), 0, 0,
                    360, _rgb(*skin), -1, cv2.LINE_AA)


def background(rng: np.random.Generator) -> np.ndarray:
    """Every still layer of the scene, float32 (H, W, 3) B′G′R′ 0…1."""
    img = np.zeros((HEIGHT, WIDTH, 3), np.float32)
    _sky(img, rng)
    _skyline(img, rng)
    _street(img, rng)
    _person(img, 470, (232, 188, 160), (40, 110, 120), (60, 40, 30), head_y=300, scale=1.0)
    _person(img, 760, (120, 78, 52), (170, 60, 40), (24, 18, 16), head_y=318, scale=0.92)
    _stall(img, rng)
    return img


# ----------------------------------------------------------------------------- moving layers
class Motion:
    """The parts of the scene that change with time t (s)."""

    def __init__(self, rng: np.random.Generator):
        self.lanterns = [(300, 0.9, 0.0, _rgb(255, 80, 30)), (600, 0.7, 1.3, _rgb(255, 170, 40)),
                         (880, 0.8, 2.1, _rgb(255, 60, 90))]
        self.halo = _glow_sprite(90, 30.0)
        self.bulb = _glow_sprite(9, 3.0)
        self.puff = _glow_sprite(40, 13.0)
        self.bulbs = [(int(x), 244 + int(6 * math.sin(x / 50.0))) for x in range(120, 1065, 35)]
        palette = [_rgb(255, 30, 30), _rgb(30, 255, 60), _rgb(40, 90, 255), _rgb(255, 220, 30),
                   _rgb(255, 40, 220)]
        self.bulb_colours = [palette[i % len(palette)] for i in range(len(self.bulbs))]
        self.bulb_phase = rng.uniform(0, 2 * math.pi, len(self.bulbs))
        self.puffs = rng.uniform(0, 1, (9, 3))  # birth phase, sideways drift, size
        self.ticker_text = "  NIGHT MARKET  *  FRESH FRUIT  *  HOT TEA  *  OPEN LATE  "
        self.ticker = self._ticker_bitmap()

    def _ticker_bitmap(self) -> np.ndarray:
        """The ticker message rendered once at 1 dot per LED (14 rows)."""
        font, scale = cv2.FONT_HERSHEY_PLAIN, 1.0
        (w, _h), _base = cv2.getTextSize(self.ticker_text, font, scale, 1)
        bmp = np.zeros((14, w + 4), np.uint8)
        cv2.putText(bmp, self.ticker_text, (1, 12), font, scale, 255, 1, cv2.LINE_8)
        return bmp > 0

    def draw(self, img: np.ndarray, t: float) -> None:
        self._fairy_lights(img, t)
        self._lanterns(img, t)
        self._steam(img, t)
        self._ticker(img, t)
        self._bicycle(img, t)

    def _fairy_lights(self, img, t):
        for (x, y), col, ph in zip(self.bulbs, self.bulb_colours, self.bulb_phase, strict=True):
            level = 0.75 + 0.25 * math.sin(2 * math.pi * 0.4 * t + ph)  # 0.4 Hz swell
            _add_sprite(img, self.bulb, x, y, col, 1.2 * level)

    def _lanterns(self, img, t):
        for x, f_hz, ph, col in self.lanterns:
            ang = 0.12 * math.sin(2 * math.pi * f_hz * t * 0.5 + ph)
            length = 70
            cx = x + length * math.sin(ang)
            cy = 225 + length * math.cos(ang)
            cv2.line(img, (x, 225), (int(cx), int(cy)), (0.1, 0.1, 0.1), 2, cv2.LINE_AA)
            _add_sprite(img, self.halo, cx, cy + 22, col, 0.45)
            axes = (26, 32)
            cv2.ellipse(img, (int(cx), int(cy + 24)), axes, math.degrees(ang), 0, 360,
                        tuple(min(1.0, 1.15 * c + 0.1) for c in col), -1, cv2.LINE_AA)
            for k in (-14, 0, 14):  # ribs
                cv2.ellipse(img, (int(cx), int(cy + 24)), (abs(k) + 3, 32),
                            math.degrees(ang), 0, 360, tuple(0.6 * c for c in col), 1,
                            cv2.LINE_AA)

    def _steam(self, img, t):
        for birth, drift, size in self.puffs:
            age = (t * 0.35 + birth) % 1.0
            cx = POT_X + 40 * (drift - 0.5) * age * 3 + 10 * math.sin(6 * age + 7 * drift)
            cy = COUNTER_Y - 85 - 260 * age
            opacity = 0.28 * math.sin(math.pi * age) * (0.6 + 0.4 * size)
            _blend_sprite(img, self.puff, cx, cy, _rgb(200, 200, 210), opacity)

    def _ticker(self, img, t):
        x0, y0, cols, pitch = 360, 48, 96, 5
        rows = self.ticker.shape[0]
        cv2.rectangle(img, (x0 - 8, y0 - 8), (x0 + cols * pitch + 4, y0 + rows * pitch + 4),
                      (0.02, 0.02, 0.02), -1)
        shift = int(t * 24.0) % self.ticker.shape[1]  # 24 dots/s
        window = np.roll(self.ticker, -shift, axis=1)[:, :cols]
        on, off = _rgb(255, 40, 20), _rgb(55, 10, 8)
        for r in range(rows):
            for c in range(cols):
                cv2.circle(img, (x0 + c * pitch, y0 + r * pitch), 2,
                           on if window[r, c] else off, -1, cv2.LINE_AA)

    def _bicycle(self, img, t):
        x = -160 + (WIDTH + 320) * (t / SECONDS)
        y = 640
        radius = 38
        col = (0.06, 0.06, 0.07)
        spin = -x / radius  # rolling without slipping
        for wx in (x - 55, x + 55):
            cv2.circle(img, (int(wx), y), radius, col, 3, cv2.LINE_AA)
            for k in range(8):
                a = spin + k * math.pi / 4
                cv2.line(img, (int(wx), y), (int(wx + radius * math.cos(a)),
                                             int(y + radius * math.sin(a))),
                         (0.5, 0.5, 0.52), 1, cv2.LINE_AA)
        pts = np.array([[x - 55, y], [x - 10, y - 55], [x + 40, y - 55], [x + 55, y],
                        [x, y], [x - 55, y]], np.int32)
        cv2.polylines(img, [pts], False, _rgb(20, 90, 200), 4, cv2.LINE_AA)
        cv2.line(img, (int(x - 10), int(y - 55)), (int(x - 22), int(y - 140)), col, 14,
                 cv2.LINE_AA)  # rider's back
        cv2.circle(img, (int(x - 20), int(y - 160)), 18, _rgb(90, 60, 45), -1, cv2.LINE_AA)
        cv2.line(img, (int(x - 20), int(y - 120)), (int(x + 40), int(y - 70)), col, 9,
                 cv2.LINE_AA)  # arm


def render_frames():
    """Yield the 180 frames as uint8 (H, W, 3) R′G′B′."""
    rng = np.random.default_rng(SEED)
    still = background(rng)
    motion = Motion(rng)
    frame = np.empty_like(still)
    for i in range(N_FRAMES):
        np.copyto(frame, still)
        motion.draw(frame, i / FPS)
        bgr = np.clip(frame * 255.0 + 0.5, 0, 255).astype(np.uint8)
        yield bgr[:, :, ::-1].copy()


# ----------------------------------------------------------------------------- sound
def soundtrack() -> np.ndarray:
    """Kick on every beat at 120 BPM plus a bass line in eighth notes; (n, 2) float32."""
    n = int(round(SECONDS * AUDIO_RATE))
    t = np.arange(n) / AUDIO_RATE
    out = np.zeros(n, np.float64)
    beat = 60.0 / BPM
    kick_len = int(0.45 * AUDIO_RATE)
    tk = np.arange(kick_len) / AUDIO_RATE
    f = 48.0 + 110.0 * np.exp(-tk / 0.028)  # falling pitch
    kick = np.sin(2 * np.pi * np.cumsum(f) / AUDIO_RATE) * np.exp(-tk / 0.16)
    kick[: int(0.002 * AUDIO_RATE)] *= np.linspace(0, 1, int(0.002 * AUDIO_RATE))
    for k in range(int(SECONDS / beat)):
        s = int(round(k * beat * AUDIO_RATE))
        e = min(n, s + kick_len)
        out[s:e] += 0.9 * kick[: e - s]
    # bass: A minor riff, eighth notes, band-limited sawtooth through a low-pass
    riff = [55.0, 55.0, 65.41, 55.0, 73.42, 55.0, 82.41, 49.0]
    step = beat / 2
    bass = np.zeros(n)
    for k in range(int(SECONDS / step)):
        s = int(round(k * step * AUDIO_RATE))
        e = min(n, int(round((k + 1) * step * AUDIO_RATE)))
        tt = t[s:e] - t[s]
        f0 = riff[k % len(riff)]
        saw = sum(np.sin(2 * np.pi * h * f0 * tt) / h for h in range(1, 40) if h * f0 < 4000)
        env = np.minimum(1.0, tt / 0.004) * np.exp(-tt / 0.18)
        bass[s:e] = saw * env
    sos = signal.butter(2, 600.0, fs=AUDIO_RATE, output="sos")
    out += 0.35 * signal.sosfilt(sos, bass)
    out *= 10 ** (-3 / 20) / np.max(np.abs(out))  # peak −3 dBFS
    stereo = np.stack([out, out], axis=1)
    return stereo.astype(np.float32)


def encode_audio(path: Path) -> None:
    """Encode the soundtrack as AAC-LC (ffmpeg's native encoder) into *path* (.m4a)."""
    pcm = soundtrack()
    res = _ffmpeg.run(["-y", "-v", "error", "-f", "f32le", "-ar", str(AUDIO_RATE), "-ac", "2",
                       "-i", "pipe:0", "-c:a", "aac", "-b:a", "128k", str(path)],
                      input_bytes=pcm.tobytes())
    if res.returncode != 0:
        raise LivecurveError(f"{path}: AAC encoding failed: "
                             + _ffmpeg.tail_text(res.stderr.decode().splitlines()))


def make(out: Path, *, force: bool) -> None:
    """Render the picture and sound and write them to *out* (all-or-nothing)."""
    check_target(out, force=force)  # refuse early, before any work
    with tempfile.TemporaryDirectory(prefix="livecurve-demo-") as tmp:
        audio = Path(tmp) / "soundtrack.m4a"
        encode_audio(audio)
        with ClipWriter(out, width=WIDTH, height=HEIGHT, fps=FPS, codec="h264",
                        audio_from=audio, force=force) as writer:
            for rgb in render_frames():
                writer.write(rgb)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path(__file__).with_name("demo.mp4"))
    ap.add_argument("--force", action="store_true", help="replace an existing clip")
    args = ap.parse_args(argv)
    try:
        make(args.out, force=args.force)
    except LivecurveError as exc:
        print(f"make_demo_clip: {exc}", file=sys.stderr)
        return exc.exit_code
    except subprocess.SubprocessError as exc:  # pragma: no cover
        print(f"make_demo_clip: {exc}", file=sys.stderr)
        return 2
    print(f"wrote {args.out} ({args.out.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
