"""Measurement report of a chain: test signals through the engine, figures per channel.

The signals of :mod:`livecurve.signal.patterns` are put, as zero-centred channel volts, through
the same :class:`~livecurve.engine.frameflow.FrameFlow` engine ``render`` builds (same tables,
same line filters at the format's pixel clock, same lead-in), one test line per row of one
frame.  What is measured is the chain's analog output before the output converter, as a
waveform monitor on the board's output would see it.

Figures (definitions; sources in ``docs/test-signals.md``)
---------------------------------------------------------
* **DC gain and offset**: least-squares line through the 11 tread levels of the 10-step
  staircase (input 0…700 mV across each channel's range): slope, and its value at 0 V centred
  input (mV).
* **Swept response**: rows of sines at whole DFT bins of the last 3/4 of the line (so harmonics
  and the mean fall on other bins and do not leak), 0.1 V amplitude about 0 V.  H(f) = output
  bin / input bin; ``gain_db`` is relative to |H| at 0 Hz, extrapolated in f² from the two
  lowest tones.  In steady state this is exactly
  the response of the discrete filters at the pixel clock.
* **−3 dB frequency**: first crossing of half power (−3.01 dB), refined on every DFT bin around
  it, linear in dB between bins; None when the response stays above it up to the last tone.
* **Low-frequency delay**: −Δφ/Δω between the two lowest tones (group delay), ns.  Sample n of
  the output is the circuit's output at the *end* of pixel n (engine convention) while the
  input is held over the pixel, so a stage with analog group delay τ measures τ − T/2
  (T = 1 / pixel clock): ZOH adds T/2, reading at the end removes T.
* **Pulse delay**: centroid of the output pulse minus that of the input pulse; for a linear
  chain this is its group delay at 0 Hz (Σ n·h[n] / Σ h[n]), a second reading of the delay.
* **Multiburst**: each packet's amplitude (least-squares sine at its frequency over the packet's
  steady middle) relative to the flag's (the low-frequency square wave), output over input, dB.
* **Pulse and bar**: 2T sine-squared pulse and a bar with 2T raised-cosine edges (T from the
  format's bandwidth).  Pulse-to-bar = (pulse height / bar height)_out ÷ (…)_in, %; overshoot =
  peak above the settled bar after its rising edge, % of the bar; ringing = largest excursion
  from the settled level after the first return through it, %; settling time = how much later
  than the input the output last lies more than 1 % of the bar from its settled level, ns
  (whole pixels).
* **Linearity**: staircase step heights h_k; step ratios h_k / mean(h); non-linearity =
  (max h − min h) / max h, % (the classic step-height definition, ITU-T J.63 from memory);
  max deviation = largest distance of a tread from the line through the end treads, % of span.
* **Levels**: output extremes over 100 % and 75 % bars, staircase and pulse lines, in the
  analog convention (Y′ and R′G′B′ mV above blanking, Pb/Pr mV), against 0…700 / ±350 mV.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from livecurve.config.chainfile import ChainSpec
from livecurve.config.limits import Limits
from livecurve.errors import ConfigError
from livecurve.signal import patterns
from livecurve.signal.component import (
    Y_SPAN_V,
    centre_offsets_v,
    channel_names,
    ypbpr_to_rgb_matrix,
)
from livecurve.signal.timing import VideoFormat, get_format

#: Tones in the swept response (log-spaced whole DFT bins).
N_TONES = 48
#: Tone amplitude about 0 V centred (V): small enough to read a curve's local slope.
TONE_AMP_V = 0.1
#: Settling band, fraction of the bar.
SETTLE_FRACTION = 0.01
#: The "−3 dB" point is the half-power point, −10·log10(2) = −3.0103 dB.
HALF_POWER_DB = -10.0 * math.log10(2.0)
#: Format used when neither the chain nor the command names one.
DEFAULT_FORMAT = "1080p30"


@dataclasses.dataclass
class Bench:
    """A chain ready to measure: its frame flow at one format, temperature and knob set."""

    spec: ChainSpec
    fmt: VideoFormat
    flow: object
    width: int

    @property
    def pixel_period_s(self) -> float:
        return self.fmt.active_w / self.width / self.fmt.pixel_clock_hz


def choose_format(spec: ChainSpec, name: str | None) -> VideoFormat:
    """``--format`` if given, else the chain's own format, else 1080p30."""
    if name:
        return get_format(name)
    return get_format(spec.format if spec.format != "auto" else DEFAULT_FORMAT)


def make_bench(spec: ChainSpec, *, fmt: str | None = None, t_kelvin: float | None = None,
               live: dict | None = None, rows: int = 8) -> Bench:
    """Build the chain's frame flow exactly as ``render`` does, at the measuring format."""
    from livecurve.engine.frameflow import FrameFlow
    f = choose_format(spec, fmt)
    s = dataclasses.replace(spec, format=f.name)
    matrix = "bt709" if f.active_h >= 720 else "bt601"
    flow = FrameFlow(s, width=f.active_w, height=rows, fps=f.frame_rate, clip_matrix=matrix,
                     t_kelvin=t_kelvin)
    for name, v in (live or {}).items():
        flow.engine.set_live(name, v)
    return Bench(s, f, flow, f.active_w)


def run_lines(bench: Bench, lines_v: np.ndarray) -> np.ndarray:
    """Put test lines (3, R, W) of centred volts through the chain's engine; float64 out."""
    from livecurve.engine.pipeline import FrameEngine
    planes = np.ascontiguousarray(lines_v, dtype=np.float32)
    eng: FrameEngine = bench.flow.engine
    return eng.process(planes).astype(np.float64)


# ------------------------------------------------------------------ signals as volts


def luma_to_volts(y: np.ndarray) -> np.ndarray:
    """A 0…1 test line on every channel as centred volts (0…700 mV across each range)."""
    v = Y_SPAN_V * np.asarray(y) - Y_SPAN_V / 2
    return np.stack([v, v, v])


def component_to_volts(ypbpr: np.ndarray, *, space: str, standard: str) -> np.ndarray:
    """Normalised Y′PbPr line (3, W) → the chain's channel volts (centred)."""
    if space == "ypbpr":
        comp = np.asarray(ypbpr, dtype=np.float64)
    else:
        comp = ypbpr_to_rgb_matrix(standard) @ np.asarray(ypbpr, dtype=np.float64)
    return Y_SPAN_V * comp - np.array(centre_offsets_v(space))[:, None]


def tone_bins(width: int, n: int = N_TONES) -> tuple[int, np.ndarray]:
    """(window start, DFT bins) of the swept tones: log-spaced whole bins 2 … 0.95·N/2."""
    nwin = (3 * width) // 4
    bins = np.unique(np.round(np.geomspace(2, 0.95 * nwin / 2, n)).astype(int))
    return width - nwin, bins


def _tone_rows(width: int, bins, tp: float, nwin: int) -> tuple[np.ndarray, np.ndarray]:
    freqs = np.asarray(bins) / (nwin * tp)
    n = np.arange(width)
    rows = TONE_AMP_V * np.sin(2 * math.pi * np.outer(bins, n) / nwin)
    return rows, freqs


def _bin_response(x: np.ndarray, y: np.ndarray, bins, start: int) -> np.ndarray:
    """Complex ratio of output to input at each row's bin over the window from *start*."""
    xw, yw = x[:, start:], y[:, start:]
    nwin = xw.shape[1]
    k = np.asarray(bins)[:, None] * np.arange(nwin)[None, :]
    e = np.exp(-2j * math.pi * k / nwin)
    return (yw * e).sum(axis=1) / (xw * e).sum(axis=1)


def _sine_amp(seg: np.ndarray, f_hz: float, tp: float) -> float:
    """Amplitude of a least-squares sine (with mean) at *f_hz* over a segment."""
    t = np.arange(seg.size) * tp
    a = np.stack([np.sin(2 * math.pi * f_hz * t), np.cos(2 * math.pi * f_hz * t),
                  np.ones_like(t)], axis=1)
    c, *_ = np.linalg.lstsq(a, seg, rcond=None)
    return float(math.hypot(c[0], c[1]))


# ------------------------------------------------------------------ the report


def measure(bench: Bench, *, limits: Limits | None = None) -> dict:
    """Measure every channel of a bench; the report as a JSON-ready dict.

    Returns
    -------
    dict
        ``notes``, ``chain``, ``title``, ``format``, ``pixel_clock_hz``, ``space``,
        ``standard``, ``t_kelvin``, ``live``, ``nominal_bandwidth_hz``, ``channels`` (one dict
        per channel: ``channel``, ``name``, ``dc_gain``, ``dc_offset_mv``, ``f_3db_hz``,
        ``delay_ns``, ``response`` [{freq_hz, gain_db}], ``multiburst`` [{freq_hz, gain_db}],
        ``pulse_delay_ns``, ``pulse_bar_pct``, ``overshoot_pct``, ``ringing_pct``, ``settling_ns``,
        ``step_ratios``, ``nonlinearity_pct``, ``max_deviation_pct``, ``peak_mv``,
        ``trough_mv``, ``legal_mv``, ``delay_vs_ch0_ns``, ``gain_vs_ch0_pct``, ``checks``
        {figure: {value, limit, pass}}, and ``pulse``, the traces for the sheet), ``passed``.
    """
    lim = limits or Limits()
    f, w, tp = bench.fmt, bench.width, bench.pixel_period_s
    spec = bench.spec
    std = bench.flow.standard
    start, bins = tone_bins(w)
    nwin = w - start
    tones, freqs = _tone_rows(w, bins, tp, nwin)
    stair = patterns.line("staircase", f, width=w, steps=10)[0]
    burst = patterns.line("multiburst", f, width=w)[0]
    pulse = patterns.line("pulse", f, width=w)[0]
    bars100 = patterns.line("bars", f, width=w, standard=std, amp=100.0)
    bars75 = patterns.line("bars", f, width=w, standard=std, amp=75.0)
    rows = [np.stack([r, r, r]) for r in tones]
    rows += [luma_to_volts(stair), luma_to_volts(burst), luma_to_volts(pulse),
             component_to_volts(bars100, space=spec.space, standard=std),
             component_to_volts(bars75, space=spec.space, standard=std)]
    x = np.stack(rows, axis=1)  # (3, R, W)
    y = run_lines(bench, x)
    nt = len(tones)
    i_stair, i_burst, i_pulse = nt, nt + 1, nt + 2
    offs = np.array(centre_offsets_v(spec.space))
    names = channel_names(spec.space)
    chans = []
    for ch in range(3):
        h = _bin_response(x[ch, :nt], y[ch, :nt], bins, start)
        h0 = _dc_magnitude(freqs[:2], np.abs(h[:2]))
        gain_db = 20 * np.log10(np.maximum(np.abs(h) / h0, 1e-12))
        f3 = _f3db(bench, ch, freqs, gain_db, h0, start)
        ph = np.unwrap(np.angle(h))
        delay_s = -(ph[1] - ph[0]) / (2 * math.pi * (freqs[1] - freqs[0])) + 0.0
        lin = linearity(x[ch, i_stair], y[ch, i_stair], w)
        mb = multiburst(x[ch, i_burst], y[ch, i_burst], f, w, tp)
        pb = pulse_bar(x[ch, i_pulse], y[ch, i_pulse], f, w, tp)
        seen = y[ch, nt:]
        chans.append({
            "channel": ch, "name": names[ch],
            "dc_gain": lin["gain"], "dc_offset_mv": lin["offset_v"] * 1e3,
            "f_3db_hz": f3, "delay_ns": delay_s * 1e9,
            "response": [{"freq_hz": float(a), "gain_db": float(b)}
                         for a, b in zip(freqs, gain_db, strict=True)],
            "multiburst": mb,
            "pulse_delay_ns": pb["pulse_delay_ns"],
            "pulse_bar_pct": pb["pulse_bar_pct"], "overshoot_pct": pb["overshoot_pct"],
            "ringing_pct": pb["ringing_pct"], "settling_ns": pb["settling_ns"],
            "step_ratios": lin["step_ratios"], "nonlinearity_pct": lin["nonlinearity_pct"],
            "max_deviation_pct": lin["max_deviation_pct"],
            "peak_mv": float((seen.max() + offs[ch]) * 1e3),
            "trough_mv": float((seen.min() + offs[ch]) * 1e3),
            "legal_mv": [float((-Y_SPAN_V / 2 + offs[ch]) * 1e3),
                         float((Y_SPAN_V / 2 + offs[ch]) * 1e3)],
            "pulse": _trace(x[ch, i_pulse], y[ch, i_pulse], f, w, tp),
        })
    g0, d0 = chans[0]["dc_gain"], chans[0]["delay_ns"]
    for c in chans:
        c["delay_vs_ch0_ns"] = c["delay_ns"] - d0
        c["gain_vs_ch0_pct"] = 100.0 * (c["dc_gain"] / g0 - 1.0) if g0 else math.nan
        c["checks"] = checks(c, lim, f)
    eng = bench.flow.engine
    return {"notes": _notes(bench, start), "chain": spec.path, "title": spec.title,
            "format": f.name,
            "pixel_clock_hz": f.pixel_clock_hz, "space": spec.space, "standard": std,
            "t_kelvin": eng.state.t_kelvin, "live": dict(eng.state.live),
            "nominal_bandwidth_hz": patterns.nominal_bandwidth_hz(f),
            "channels": chans,
            "passed": all(ck["pass"] for c in chans for ck in c["checks"].values())}


def _notes(bench: Bench, start: int) -> list[str]:
    """Warnings about the measurement itself (a stage too slow for the line, slewing)."""
    notes = []
    for ch in range(3):
        for run in bench.flow.engine.runs[ch]:
            lf = run.line_filter
            if lf is None:
                continue
            if lf.memory_samples(tol=1e-6) > start:
                notes.append(f"channel {ch}: stage '{run.stages[-1].id}' remembers more than "
                             f"{start} samples; the tones' transients may bias the response")
            if lf.rate_limited:
                notes.append(f"channel {ch}: stage '{run.stages[-1].id}' is slew-limited; "
                             "large signals (multiburst, pulse, bar) may slew")
    return notes


def _dc_magnitude(f: np.ndarray, mag: np.ndarray) -> float:
    """|H| extrapolated to 0 Hz from two low tones: |H(f)|² = A + B·f² (even in f; exact to
    order f⁴ for any rational response)."""
    m2 = mag ** 2
    a = (f[1] ** 2 * m2[0] - f[0] ** 2 * m2[1]) / (f[1] ** 2 - f[0] ** 2)
    return float(math.sqrt(a)) if a > 0 else float(mag[0])


def _trace(x, y, fmt: VideoFormat, width: int, tp: float) -> dict:
    """The pulse-and-bar line for the sheet, with the windows worth looking at (ns)."""
    lay = patterns.pulse_layout(fmt, width)
    c = lay.pulse_centre * tp * 1e9
    e = lay.bar_start_s * 1e9
    span = max(12 * lay.had_s * 1e9, 150.0)
    return {"t_ns": (np.arange(width) * tp * 1e9).tolist(), "in_v": x.tolist(),
            "out_v": y.tolist(), "pulse_window_ns": [c - span, c + span],
            "edge_window_ns": [e - span / 2, e + 2 * span]}


def _f3db(bench, ch, freqs, gain_db, h_ref, start) -> float | None:
    """First −3 dB crossing, refined on every bin between the bracketing tones."""
    below = np.flatnonzero(gain_db <= HALF_POWER_DB)
    if below.size == 0:
        return None
    j = int(below[0])
    if j == 0:
        return float(freqs[0])
    w, tp = bench.width, bench.pixel_period_s
    nwin = w - start
    b_lo = int(round(freqs[j - 1] * nwin * tp))
    b_hi = int(round(freqs[j] * nwin * tp))
    fine = np.arange(b_lo, b_hi + 1)
    rows, ff = _tone_rows(w, fine, tp, nwin)
    xs = np.stack([rows, rows, rows])
    ys = run_lines(bench, xs)
    g = 20 * np.log10(np.abs(_bin_response(xs[ch], ys[ch], fine, start)) / h_ref)
    k = int(np.flatnonzero(g <= HALF_POWER_DB)[0]) if np.any(g <= HALF_POWER_DB) else len(g) - 1
    if k == 0:
        return float(ff[0])
    return float(ff[k - 1] + (HALF_POWER_DB - g[k - 1]) / (g[k] - g[k - 1]) * (ff[k] - ff[k - 1]))


def linearity(x: np.ndarray, y: np.ndarray, width: int, steps: int = 10) -> dict:
    """Staircase figures from one input and output line (module docstring)."""
    win = patterns.tread_windows(width, steps)
    lin = np.array([x[a:b].mean() for a, b in win])
    lout = np.array([y[a:b].mean() for a, b in win])
    return linearity_from_levels(lin, lout)


def linearity_from_levels(levels_in: np.ndarray, levels_out: np.ndarray) -> dict:
    """Gain, offset and step figures from tread levels in and out (volts)."""
    gain, off = np.polyfit(levels_in, levels_out, 1)
    h = np.diff(levels_out) * np.sign(gain or 1.0)
    hmax = float(np.max(h))
    span = levels_out[-1] - levels_out[0]
    line = levels_out[0] + span * (levels_in - levels_in[0]) / (levels_in[-1] - levels_in[0])
    return {"gain": float(gain), "offset_v": float(off),
            "step_ratios": (h / h.mean()).tolist(),
            "nonlinearity_pct": 100.0 * (hmax - float(np.min(h))) / hmax if hmax > 0 else math.nan,
            "max_deviation_pct": 100.0 * float(np.max(np.abs(levels_out - line)))
            / abs(span) if span else math.nan}


def multiburst(x, y, fmt: VideoFormat, width: int, tp: float) -> list[dict]:
    """Packet gains relative to the flag, dB, one entry per packet."""
    win = patterns.burst_windows(width)
    (a0, b0), (a1, b1) = win[0], win[1]
    flag_in = x[a0:b0].mean() - x[a1:b1].mean()
    flag_out = y[a0:b0].mean() - y[a1:b1].mean()
    ref = flag_out / flag_in
    out = []
    for (a, b), fk in zip(win[2:], patterns.packet_frequencies_hz(fmt), strict=True):
        g = _sine_amp(y[a:b], fk, tp) / _sine_amp(x[a:b], fk, tp) / abs(ref)
        out.append({"freq_hz": float(fk), "gain_db": float(20 * math.log10(max(g, 1e-12)))})
    return out


def pulse_bar(x, y, fmt: VideoFormat, width: int, tp: float) -> dict:
    """Pulse-to-bar, overshoot, ringing and settling figures (module docstring)."""
    lay = patterns.pulse_layout(fmt, width)
    base_w = (width // 16, width // 8)
    b0, b1 = int(lay.bar_start_s / tp), int(lay.bar_stop_s / tp)
    flat = (b0 + (b1 - b0) // 2, b1 - (b1 - b0) // 8)

    def heights(s):
        base = s[base_w[0]:base_w[1]].mean()
        bar = s[flat[0]:flat[1]].mean()
        half = int(math.ceil(lay.had_s / tp)) + 4
        c = lay.pulse_centre
        seg = s[c - half:c + half + 1] - base
        pk = seg[np.argmax(np.abs(seg) * np.sign(bar - base))]
        return base, bar, pk

    bx, barx, pkx = heights(x)
    by, bary, pky = heights(y)
    # centroid of the pulse from just before it to just before the bar: out − in is the
    # group delay at 0 Hz of any linear filter (Σ n·h[n] / Σ h[n])
    lo = lay.pulse_centre - int(math.ceil(lay.had_s / tp)) - 8
    hi = b0 - int(math.ceil(lay.edge_s / tp)) - 2
    n = np.arange(lo, hi)

    def centroid(s, base):
        wgt = s[lo:hi] - base
        return float((n * wgt).sum() / wgt.sum())

    pulse_delay = (centroid(y, by) - centroid(x, bx)) * tp
    amp = bary - by
    ratio = (pky / amp) / (pkx / (barx - bx)) if amp else math.nan
    yn = (y - by) / amp if amp else np.zeros_like(y)
    edge = yn[b0:flat[0]]
    ipk = int(np.argmax(edge))
    over = max(0.0, float(edge[ipk]) - 1.0)
    after = edge[ipk:] - 1.0
    cross = np.flatnonzero(after <= 0.0)
    ring = float(np.max(np.abs(after[cross[0]:]))) if cross.size and over > 0 else 0.0
    xn = (x - bx) / (barx - bx)

    def last_out(s):
        idx = np.flatnonzero(np.abs(s[b0:flat[0]] - 1.0) > SETTLE_FRACTION)
        return int(idx[-1]) + 1 if idx.size else 0

    settle = (last_out(yn) - last_out(xn)) * tp
    return {"pulse_delay_ns": pulse_delay * 1e9, "pulse_bar_pct": 100.0 * ratio,
            "overshoot_pct": 100.0 * over,
            "ringing_pct": 100.0 * ring, "settling_ns": max(settle, 0.0) * 1e9}


def checks(c: dict, lim: Limits, fmt: VideoFormat) -> dict:
    """Pass/fail of one channel's figures against the limits (0 = not checked)."""
    out = {}

    def add(name, value, limit, ok):
        out[name] = {"value": value, "limit": limit, "pass": bool(ok)}

    flat = max(abs(p["gain_db"]) for p in c["multiburst"])
    add("flatness_db", flat, lim.flatness_db, flat <= lim.flatness_db)
    fmin = lim.f_3db_min_hz or patterns.nominal_bandwidth_hz(fmt)
    f3 = c["f_3db_hz"]
    add("f_3db_hz", f3, fmin, f3 is None or f3 >= fmin)
    add("overshoot_pct", c["overshoot_pct"], lim.overshoot_pct,
        c["overshoot_pct"] <= lim.overshoot_pct)
    add("ringing_pct", c["ringing_pct"], lim.ringing_pct, c["ringing_pct"] <= lim.ringing_pct)
    if lim.settling_ns:
        add("settling_ns", c["settling_ns"], lim.settling_ns, c["settling_ns"] <= lim.settling_ns)
    pbe = abs(c["pulse_bar_pct"] - 100.0)
    add("pulse_bar_pct", c["pulse_bar_pct"], lim.pulse_bar_pct, pbe <= lim.pulse_bar_pct)
    add("nonlinearity_pct", c["nonlinearity_pct"], lim.nonlinearity_pct,
        c["nonlinearity_pct"] <= lim.nonlinearity_pct)
    add("delay_vs_ch0_ns", c["delay_vs_ch0_ns"], lim.delay_inequality_ns,
        abs(c["delay_vs_ch0_ns"]) <= lim.delay_inequality_ns)
    add("gain_vs_ch0_pct", c["gain_vs_ch0_pct"], lim.gain_inequality_pct,
        abs(c["gain_vs_ch0_pct"]) <= lim.gain_inequality_pct)
    lo, hi = c["legal_mv"]
    excess = max(0.0, c["peak_mv"] - hi, lo - c["trough_mv"])
    add("level_excess_mv", excess, lim.level_margin_mv, excess <= lim.level_margin_mv)
    if lim.dc_offset_mv:
        add("dc_offset_mv", c["dc_offset_mv"], lim.dc_offset_mv,
            abs(c["dc_offset_mv"]) <= lim.dc_offset_mv)
    return out


def parse_sweep(item: str, spec: ChainSpec) -> tuple[str, np.ndarray]:
    """``NAME=FROM:TO:STEPS`` → (knob name, values in SI units), checked against the knob."""
    from livecurve.units import parse_value
    name, eq, rest = item.partition("=")
    parts = rest.split(":")
    if not eq or len(parts) != 3:
        raise ConfigError("expected NAME=FROM:TO:STEPS", key="--sweep", value=item)
    if name not in spec.live:
        raise ConfigError(f"no live parameter '{name}'; live: {', '.join(spec.live) or 'none'}",
                          key="--sweep", value=item)
    ls = spec.live[name]
    lo = parse_value(parts[0], ls.unit, key=f"--sweep {name} FROM")
    hi = parse_value(parts[1], ls.unit, key=f"--sweep {name} TO")
    try:
        n = int(parts[2])
    except ValueError:
        n = 0
    if n < 2:
        raise ConfigError("STEPS must be a whole number >= 2", key="--sweep", value=item)
    for v in (lo, hi):
        if not ls.lo <= v <= ls.hi:
            raise ConfigError(f"outside {ls.lo:g} … {ls.hi:g}", key=f"--sweep {name}", value=v)
    return name, np.linspace(lo, hi, n)


#: Figures followed over a knob sweep.
SWEEP_FIGURES = ("dc_gain", "dc_offset_mv", "f_3db_hz", "delay_ns", "nonlinearity_pct",
                 "overshoot_pct")


def sweep_knob(bench: Bench, name: str, values, *, limits: Limits | None = None) -> dict:
    """Measure at each knob value; returns {"knob", "values", "channels": [{figure: [...]}]}."""
    eng = bench.flow.engine
    keep = eng.state.live[name]
    per = [{k: [] for k in SWEEP_FIGURES} for _ in range(3)]
    try:
        for v in values:
            eng.set_live(name, float(v))
            rep = measure(bench, limits=limits)
            for ch in range(3):
                for k in SWEEP_FIGURES:
                    per[ch][k].append(rep["channels"][ch][k])
    finally:
        eng.set_live(name, keep)
    return {"knob": name, "unit": bench.spec.live[name].unit,
            "values": [float(v) for v in values], "channels": per}

