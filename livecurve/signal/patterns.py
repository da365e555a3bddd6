"""Test signals: colour bars, ramp, staircase, multiburst, sine-squared pulse and bar, sweep,
channel timing and flat field, generated at a video format's active line and pixel clock.

Every generator returns *normalised component values* of one line, shape (3, W) float64:
Y′ 0…1 and Pb, Pr −0.5…+0.5 (the R′G′B′ → Y′PbPr matrix of
:mod:`livecurve.signal.component`).  :func:`frame` repeats a line down a picture and
:func:`to_rgb_codes` turns it into full-range R′G′B′ codes, which is what every picture
source of livecurve delivers.  ``docs/test-signals.md`` gives each signal's definition and
its source.

Sources
-------
* Colour bars: R′G′B′ each 0 or the bar amplitude (75 % or 100 %), in the order white, yellow,
  cyan, green, magenta, red, blue, black; ITU-R BT.709 / BT.601 matrices.  The 75 % BT.709
  8-bit levels are listed in REFERENCES.md (computed; SMPTE RP 219 defines HD bars).
* Sine-squared pulse: p(t) = cos²(π·t / (2·HAD)) for |t| ≤ HAD, HAD = k·T the half-amplitude
  duration, T = 1 / (2·f_c) for a system of nominal bandwidth f_c (ITU-T J.61/J.63, IEEE Std
  511; from memory).  The bar's edges are raised-cosine edges of total length 2T, the same
  shape (the integral of a sin² pulse of HAD T).
* Nominal bandwidth: 5.75 MHz for 13.5 MHz sampling (ITU-R BT.601 filter template), 30 MHz for
  74.25 MHz HD (from memory) and in proportion to the pixel clock above it (60 MHz for
  148.5 MHz, from memory).
* Multiburst, staircase, ramp, sweep, channel timing: common practice; the exact layouts
  (segment widths, pedestal, amplitudes) are our own choices, stated in the docs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from livecurve.errors import ConfigError
from livecurve.signal.component import check_standard, rgb_to_ypbpr_matrix, ypbpr_to_rgb_matrix
from livecurve.signal.timing import VideoFormat, get_format

#: Names of the test signals :func:`line` knows.
NAMES = ("bars", "ramp", "staircase", "multiburst", "pulse", "sweep", "timing", "flat")

#: Multiburst: packet frequencies as fractions of the format's nominal bandwidth (our choice:
#: for 30 MHz HD they are 1, 5, 10, 15, 20, 25, 30 MHz).
PACKET_FRACTIONS = (1 / 30, 1 / 6, 1 / 3, 1 / 2, 2 / 3, 5 / 6, 1.0)
#: Multiburst pedestal and peak-to-peak amplitude (Y′ 0…1).  Our choice; generators commonly
#: use about 60 % p-p about mid-grey (from memory).
BURST_PEDESTAL = 0.5
BURST_PP = 0.6
#: Order of the colour bars (R′, G′, B′ on/off), the classic full-field sequence.
BAR_ORDER = (("white", (1, 1, 1)), ("yellow", (1, 1, 0)), ("cyan", (0, 1, 1)),
             ("green", (0, 1, 0)), ("magenta", (1, 0, 1)), ("red", (1, 0, 0)),
             ("blue", (0, 0, 1)), ("black", (0, 0, 0)))


def nominal_bandwidth_hz(fmt: VideoFormat) -> float:
    """Nominal luma bandwidth of a format, Hz (module docstring: BT.601 5.75 MHz; HD 30 MHz
    at 74.25 MHz, scaled with the pixel clock; from memory for HD)."""
    if fmt.pixel_clock_hz < 20e6:
        return 5.75e6 * fmt.pixel_clock_hz / 13.5e6
    return 30e6 * fmt.pixel_clock_hz / 74.25e6


def t_step_s(fmt: VideoFormat) -> float:
    """T = 1 / (2·f_c), seconds (16.8 ns at 74.25 MHz HD; 87 ns for SD)."""
    return 1.0 / (2.0 * nominal_bandwidth_hz(fmt))


def packet_frequencies_hz(fmt: VideoFormat) -> np.ndarray:
    """Multiburst packet frequencies for the format, Hz, shape (7,)."""
    return nominal_bandwidth_hz(fmt) * np.array(PACKET_FRACTIONS)


def _fmt(fmt) -> VideoFormat:
    return get_format(fmt) if isinstance(fmt, str) else fmt


def _grey(y: np.ndarray) -> np.ndarray:
    out = np.zeros((3, y.size))
    out[0] = y
    return out


def raised_edge(t_s: np.ndarray, t0_s: float, length_s: float) -> np.ndarray:
    """0 before *t0_s*, 1 after ``t0_s + length_s``, a raised cosine between.

    The derivative is a sin² pulse, so the edge is as band-limited as the sine-squared pulse
    of half-amplitude duration ``length_s / 2``.
    """
    x = np.clip((np.asarray(t_s) - t0_s) / length_s, 0.0, 1.0)
    return 0.5 - 0.5 * np.cos(math.pi * x)


def sin2_pulse(t_s: np.ndarray, centre_s: float, had_s: float) -> np.ndarray:
    """Sine-squared pulse of half-amplitude duration *had_s*, peak 1 at *centre_s*."""
    u = (np.asarray(t_s) - centre_s) / had_s
    return np.where(np.abs(u) <= 1.0, np.cos(0.5 * math.pi * u) ** 2, 0.0)


def staircase_levels(steps: int) -> np.ndarray:
    """Tread levels of an *steps*-step staircase, Y′ 0…1: 0, 1/steps, …, 1."""
    if steps not in (5, 10):
        raise ConfigError("a staircase has 5 or 10 steps", key="steps", value=steps)
    return np.arange(steps + 1) / steps


def tread_windows(width: int, steps: int) -> list[tuple[int, int]]:
    """Sample ranges (start, stop) of each tread's flat middle (the central half)."""
    w = width / (steps + 1)
    return [(int(round(i * w + w / 4)), int(round(i * w + 3 * w / 4))) for i in range(steps + 1)]


def burst_windows(width: int) -> list[tuple[int, int]]:
    """Sample ranges of the flag's two halves and of each packet's steady middle."""
    seg = width / 8
    flag = [(int(round(seg * 0.1)), int(round(seg * 0.4))),
            (int(round(seg * 0.6)), int(round(seg * 0.9)))]
    packets = [(int(round(seg * (k + 0.3))), int(round(seg * (k + 0.875)))) for k in range(1, 8)]
    return flag + packets


@dataclass(frozen=True)
class PulseLayout:
    """Where the sine-squared pulse and the bar sit on a line (samples)."""

    pulse_centre: int
    bar_start_s: float
    bar_stop_s: float
    had_s: float
    edge_s: float


def pulse_layout(fmt: VideoFormat, width: int, *, had_t: float = 2.0) -> PulseLayout:
    """Pulse centred on a sample at a quarter of the line; bar from 3/8 to 7/8 of the line."""
    tp = fmt.active_w / width / fmt.pixel_clock_hz
    t = t_step_s(fmt)
    return PulseLayout(pulse_centre=width // 4, bar_start_s=3 * width / 8 * tp,
                       bar_stop_s=7 * width / 8 * tp, had_s=had_t * t, edge_s=2 * t)


def line(name: str, fmt, *, width: int | None = None, standard: str = "bt709",
         amp: float = 75.0, steps: int = 10, level: float = 50.0, had_t: float = 2.0,
         to_hz: float | None = None) -> np.ndarray:
    """One line of a test signal, normalised Y′ 0…1, Pb/Pr ±0.5, shape (3, width) float64.

    Parameters
    ----------
    name : str
        One of :data:`NAMES`.
    fmt : VideoFormat or str
        Format whose pixel clock and bandwidth set frequencies and T.
    width : int, optional
        Samples per line (default the format's active width); each sample lasts
        active_w / (width · pixel clock) seconds.
    standard : str
        Matrix for colour bars.
    amp : float
        Colour-bar amplitude, percent (75 or 100).
    steps : int
        Staircase steps (5 or 10).
    level : float
        Flat-field level, percent of Y′ (0…100).
    had_t : float
        Pulse half-amplitude duration in units of T (1 or 2).
    to_hz : float, optional
        Sweep end frequency (default the nominal bandwidth).
    """
    f = _fmt(fmt)
    w = int(width or f.active_w)
    if w < 64:
        raise ConfigError("a test line needs at least 64 samples", key="width", value=w)
    tp = f.active_w / w / f.pixel_clock_hz
    t = np.arange(w) * tp
    if name == "bars":
        if amp not in (75.0, 100.0):
            raise ConfigError("colour bars are 75 or 100 (percent)", key="amp", value=amp)
        m = rgb_to_ypbpr_matrix(check_standard(standard))
        idx = np.minimum((np.arange(w) * len(BAR_ORDER)) // w, len(BAR_ORDER) - 1)
        rgb = np.array([c for _n, c in BAR_ORDER], dtype=np.float64) * (amp / 100.0)
        return (m @ rgb.T)[:, idx]
    if name == "ramp":
        return _grey(np.clip((np.arange(w) - w / 16) / (w * 7 / 8), 0.0, 1.0))
    if name == "staircase":
        lv = staircase_levels(int(steps))
        tw = w / lv.size
        y = np.zeros(w)
        for k in range(1, lv.size):
            y += (lv[k] - lv[k - 1]) * raised_edge(t, (k * tw) * tp - t_step_s(f), 2 * t_step_s(f))
        return _grey(y)
    if name == "multiburst":
        seg = w / 8
        y = np.full(w, BURST_PEDESTAL)
        a = BURST_PP / 2
        n = np.arange(w)
        y[(n >= 0) & (n < seg / 2)] += a
        y[(n >= seg / 2) & (n < seg)] -= a
        for k, fk in enumerate(packet_frequencies_hz(f), start=1):
            lo, hi = int(round(seg * (k + 0.125))), int(round(seg * (k + 0.875)))
            y[lo:hi] += a * np.sin(2 * math.pi * fk * (t[lo:hi] - t[lo]))
        return _grey(y)
    if name == "pulse":
        if not 0.5 <= had_t <= 8.0:
            raise ConfigError("pulse half-amplitude duration is 0.5 … 8 T (1T and 2T are the "
                              "usual ones)", key="had", value=had_t)
        lay = pulse_layout(f, w, had_t=had_t)
        y = sin2_pulse(t, lay.pulse_centre * tp, lay.had_s)
        y += raised_edge(t, lay.bar_start_s, lay.edge_s)
        y -= raised_edge(t, lay.bar_stop_s, lay.edge_s)
        return _grey(y)
    if name == "sweep":
        f1 = nominal_bandwidth_hz(f) if to_hz is None else float(to_hz)
        if not 0 < f1 < 0.5 * f.pixel_clock_hz * f.active_w / w:
            raise ConfigError("sweep end must lie between 0 and half the sample rate",
                              key="to", value=to_hz)
        dur = w * tp
        phase = 2 * math.pi * (0.5 * f1 / dur * t ** 2)  # linear chirp 0 → f1
        return _grey(BURST_PEDESTAL + BURST_PP / 2 * np.sin(phase))
    if name == "timing":
        # a sin² pulse of HAD 2T at the same instants on all three channels, every 1/8 line,
        # on mid-grey: Y′ 0.5 → 0.65, Pb and Pr 0 → +0.15 (stays inside the R′G′B′ cube)
        out = np.zeros((3, w))
        out[0] = 0.5
        had = 2 * t_step_s(f)
        for k in range(1, 8):
            p = sin2_pulse(t, round(k * w / 8) * tp, had)
            out[0] += 0.15 * p
            out[1] += 0.15 * p
            out[2] += 0.15 * p
        return out
    if name == "flat":
        if not 0.0 <= level <= 100.0:
            raise ConfigError("flat-field level is 0…100 (percent)", key="level", value=level)
        return _grey(np.full(w, level / 100.0))
    raise ConfigError(f"unknown test signal; known: {', '.join(NAMES)}", key="pattern",
                      value=name)


def tone(fmt, freq_hz: float, *, width: int | None = None, mean: float = 0.0,
         amp: float = 0.1) -> np.ndarray:
    """A sine of *freq_hz* along a line, phase 0 at sample 0, shape (width,) float64."""
    f = _fmt(fmt)
    w = int(width or f.active_w)
    tp = f.active_w / w / f.pixel_clock_hz
    return mean + amp * np.sin(2 * math.pi * float(freq_hz) * np.arange(w) * tp)


def frame(name: str, fmt, *, height: int | None = None, **opts) -> np.ndarray:
    """A whole picture of one test signal, shape (3, H, W) float64, normalised Y′PbPr."""
    f = _fmt(fmt)
    ln = line(name, f, **opts)
    h = int(height or f.active_h)
    return np.ascontiguousarray(np.broadcast_to(ln[:, None, :], (3, h, ln.shape[1])))


def to_rgb_codes(ypbpr: np.ndarray, *, standard: str, bits: int = 16) -> np.ndarray:
    """Normalised Y′PbPr planes (3, H, W) → full-range R′G′B′ codes (H, W, 3).

    R′G′B′ = inverse matrix · (Y′, Pb, Pr), clipped to 0…1, × (2^bits − 1), rounded half up;
    uint8 for 8 bits, uint16 otherwise.
    """
    mi = ypbpr_to_rgb_matrix(check_standard(standard))
    rgb = np.einsum("ij,jhw->hwi", mi, np.asarray(ypbpr, dtype=np.float64))
    top = 2 ** int(bits) - 1
    codes = np.floor(np.clip(rgb, 0.0, 1.0) * top + 0.5)
    return codes.astype(np.uint8 if bits <= 8 else np.uint16)
