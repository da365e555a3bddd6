"""Thermal drift of a chain: every channel's DC curve over a range of temperatures, and a
reference picture processed at several of them.

The physics is the junction laws of :mod:`livecurve.circuit.devices` (SPICE level-1 diode
and Gummel–Poon IS(T), VT = kT/q): at constant current a junction's voltage falls by
≈ 2 mV/K (Sedra & Smith; common practice) and a transdiode log stage's volts per decade
grow ∝ T (TI/National AN-30).  Every stage of the chain sits at the same junction
temperature here (self-heating is left to :mod:`livecurve.circuit.thermal`), which is what
an ngspice ``.temp`` sweep of the exported deck computes; the tests compare the two.

Outputs
-------
* CSV, one row per (temperature, input): ``temp_c,input_v,out0_v,out1_v,out2_v``.
* Figure (PNG, SVG or PDF by extension): per channel, the curves (top) and their shift from
  the curve at the reference temperature (bottom, mV), one trace per temperature coloured
  from cold (blue) to hot (red); each panel has its own axes.
* Strip PNG: a reference frame — a grey step wedge, a continuous grey ramp and 75 % colour
  bars made in code, or a given still — through the whole frame path
  (:class:`livecurve.engine.frameflow.FrameFlow`, dynamics included) at each temperature,
  tiled with labels.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass, field

import numpy as np

from livecurve.circuit.chain import ChainModel
from livecurve.config.chainfile import ChainSpec
from livecurve.errors import ConfigError
from livecurve.outputs.clf import check_live
from livecurve.signal.component import channel_names

CSV_HEADER = "temp_c,input_v,out0_v,out1_v,out2_v"
#: Junction temperatures accepted, kelvin: −55 °C … +150 °C, the widest range small-signal
#: silicon parts are specified over (common practice); the device laws are fitted near 27 °C.
T_MIN_K, T_MAX_K = 218.15, 423.15
MAX_STEPS = 41
#: Background and label colours of the picture strip (BGR).
STRIP_BG_BGR, STRIP_TEXT_BGR = (28, 24, 22), (225, 225, 225)
#: 75 % colour bars as R′G′B′ fractions (white, yellow, cyan, green, magenta, red, blue,
#: black): every channel at 0 or 0.75 (SMPTE RP 219 / ITU-R BT.709 75 % bars).
BARS_75 = np.array([[1, 1, 1], [1, 1, 0], [0, 1, 1], [0, 1, 0], [1, 0, 1], [1, 0, 0],
                    [0, 0, 1], [0, 0, 0]], dtype=np.float64) * 0.75


def temperature_steps(from_k: float, to_k: float, steps: int) -> np.ndarray:
    """*steps* evenly spaced temperatures from *from_k* to *to_k*, kelvin, checked.

    Raises
    ------
    ConfigError
        Steps not 2…41, range reversed or outside −55…+150 °C.
    """
    if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) \
            or not 2 <= steps <= MAX_STEPS:
        raise ConfigError(f"number of temperatures must be a whole number 2…{MAX_STEPS}",
                          key="--steps", value=steps)
    for key, t in (("--from", from_k), ("--to", to_k)):
        if not (math.isfinite(t) and T_MIN_K <= t <= T_MAX_K):
            raise ConfigError(f"temperature {t - 273.15:.1f} °C is outside −55 … +150 °C, "
                              "the range the junction models are used over", key=key,
                              value=f"{t - 273.15:g}C")
    if not to_k > from_k:
        raise ConfigError("--to must be above --from", key="--to",
                          value=f"{to_k - 273.15:g}C")
    return np.linspace(from_k, to_k, steps)


def drift_curves(spec: ChainSpec, temps_k, *, points: int = 201,
                 live: dict | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Every channel's DC transfer at each temperature.

    Parameters
    ----------
    spec : ChainSpec
    temps_k : array_like (T,)
        Junction temperatures, kelvin (all stages alike).
    points : int
        Sweep points over the chain's sweep range.
    live : dict, optional
        Knob values (default their starting values).

    Returns
    -------
    vin : ndarray (N,)
        Input volts.
    out : ndarray (T, 3, N)
        Output volts.
    """
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) \
            or not 2 <= points <= 100001:
        raise ConfigError("sweep points must be a whole number 2…100001", key="--points",
                          value=points)
    lv = check_live(spec, live)
    model = ChainModel(spec)
    vin = np.linspace(*spec.sweep_v, points)
    temps = np.atleast_1d(np.asarray(temps_k, dtype=np.float64))
    out = np.stack([model.transfer_all(vin, t_kelvin=float(t), live=lv) for t in temps])
    return vin, out


def drift_csv_text(vin: np.ndarray, out: np.ndarray, temps_k) -> str:
    """CSV text with header ``temp_c,input_v,out0_v,out1_v,out2_v``."""
    buf = io.StringIO()
    buf.write(CSV_HEADER + "\n")
    for t, o in zip(np.asarray(temps_k), out, strict=True):
        rows = np.column_stack([np.full(vin.size, t - 273.15), vin, o.T])
        np.savetxt(buf, rows, fmt="%.9g", delimiter=",")
    return buf.getvalue()


# ---------------------------------------------------------------------------- pictures
def reference_frame(width: int = 480, height: int = 270) -> np.ndarray:
    """A reference picture made in code, 16-bit full-range R′G′B′ (H, W, 3).

    Top third: an 11-step grey wedge 0, 10 … 100 %; middle third: a continuous grey ramp
    0 → 100 %; bottom third: 75 % colour bars (white, yellow, cyan, green, magenta, red,
    blue, black).
    """
    if width < 16 or height < 6:
        raise ConfigError("reference frame must be at least 16 × 6 pixels", key="size",
                          value=(width, height))
    x = np.arange(width)
    wedge = np.minimum(x * 11 // width, 10) / 10.0
    ramp = x / (width - 1)
    bars = BARS_75[np.minimum(x * 8 // width, 7)]
    h1, h2 = height // 3, 2 * height // 3
    img = np.empty((height, width, 3))
    img[:h1] = wedge[None, :, None]
    img[h1:h2] = ramp[None, :, None]
    img[h2:] = bars[None, :, :]
    return np.round(img * 65535).astype(np.uint16)


def strip_frames(spec: ChainSpec, temps_k, *, frame: np.ndarray | None = None,
                 live: dict | None = None, fps: float = 30.0) -> list[np.ndarray]:
    """The reference frame (or *frame*) through the whole frame path at each temperature.

    Parameters
    ----------
    frame : ndarray (H, W, 3) uint8 or uint16, optional
        Full-range R′G′B′ codes; default :func:`reference_frame`.
    fps : float
        Frame rate the frame is taken to ride on (for the video timing of line filters).

    Returns
    -------
    list of ndarray (H, W, 3) uint8
        R′G′B′ codes, one picture per temperature.
    """
    from livecurve.engine.frameflow import FrameFlow
    img = reference_frame() if frame is None else np.ascontiguousarray(frame)
    if img.ndim != 3 or img.shape[2] != 3 or img.dtype not in (np.uint8, np.uint16):
        raise ConfigError("a frame must be (H, W, 3) uint8 or uint16 codes", key="frame",
                          value=f"{img.dtype} {img.shape}")
    temps = np.atleast_1d(np.asarray(temps_k, dtype=np.float64))
    h, w = img.shape[:2]
    flow = FrameFlow(spec, width=w, height=h, fps=fps, t_kelvin=float(temps[0]),
                     out_dtype=np.uint8)
    for name, v in check_live(spec, live).items():
        if flow.engine.state.live.get(name) != v:
            flow.engine.set_live(name, v)
    out = []
    for i, t in enumerate(temps):
        if i:
            flow.engine.set_temperature(float(t))
        out.append(flow.process(img, 0).copy())
    return out


def _load_still(source, width: int) -> np.ndarray:
    if isinstance(source, np.ndarray):
        img = source
    else:
        from livecurve.media.probe import read_image
        img = read_image(source)
    if img.shape[1] > width:
        import cv2
        h = max(2, round(img.shape[0] * width / img.shape[1]))
        img = cv2.resize(img, (width, h), interpolation=cv2.INTER_AREA)
    return np.ascontiguousarray(img)


def tile_strip(frames: list, temps_k, *, columns: int = 4) -> np.ndarray:
    """Tile pictures (RGB uint8) in a grid with a temperature label under each; BGR uint8."""
    import cv2

    h, w = frames[0].shape[:2]
    cols = min(columns, len(frames))
    rows = math.ceil(len(frames) / cols)
    pad, lab = 8, 26
    img = np.full((rows * (h + lab + pad) + pad, cols * (w + pad) + pad, 3), STRIP_BG_BGR,
                  dtype=np.uint8)
    for i, (fr, t) in enumerate(zip(frames, np.asarray(temps_k), strict=True)):
        r, c = divmod(i, cols)
        y0, x0 = pad + r * (h + lab + pad), pad + c * (w + pad)
        img[y0:y0 + h, x0:x0 + w] = fr[:, :, ::-1]
        cv2.putText(img, f"{t - 273.15:.1f} C", (x0 + 4, y0 + h + 19),
                    cv2.FONT_HERSHEY_SIMPLEX, 0.55, STRIP_TEXT_BGR, 1, cv2.LINE_AA)
    return img


def drift_figure(vin: np.ndarray, out: np.ndarray, temps_k, spec: ChainSpec, *,
                 ref_index: int = 0, live: dict | None = None):
    """Per channel, the curves (top row, V) and their shift from the curve at the
    reference temperature (bottom row, mV), one line per temperature coloured cold (blue)
    to hot (red) with a colour scale in °C.  Every panel keeps its own axes (a channel
    that barely moves is not flattened by one that moves a lot).  Returns a Figure."""
    from matplotlib import colormaps
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize

    from livecurve.outputs.plots import knob_text, new_figure
    temps_c = np.asarray(temps_k, dtype=np.float64) - 273.15
    names = channel_names(spec.space)
    norm = Normalize(float(temps_c[0]), float(temps_c[-1]))
    cmap = colormaps["coolwarm"]
    fig, axes = new_figure(1440, 700, nrows=2, ncols=3)
    for c in range(3):
        top, bot = axes[0, c], axes[1, c]
        shift = (out[:, c] - out[ref_index, c]) * 1e3
        for k, tc in enumerate(temps_c):
            col = cmap(norm(tc))
            top.plot(vin, out[k, c], color=col, linewidth=1.2, label=f"{tc:.4g} °C")
            bot.plot(vin, shift[k], color=col, linewidth=1.2, label=f"{tc:.4g} °C")
        top.set_title(f"channel {c} ({names[c]})", fontsize="small")
        bot.set_title(f"shift from {temps_c[ref_index]:.4g} °C", fontsize="small")
        top.set_ylabel("output [V]")
        bot.set_ylabel("output shift [mV]")
        for ax in (top, bot):
            ax.set_xlabel("input [V]")
            ax.grid(True, alpha=0.35)
    sm = ScalarMappable(norm=norm, cmap=cmap)
    fig.colorbar(sm, ax=axes, label="junction temperature [°C]", shrink=0.8)
    knobs = knob_text(spec, live)
    fig.suptitle(f"{spec.title}: DC transfer over temperature, {temps_c[0]:.4g} … "
                 f"{temps_c[-1]:.4g} °C in {len(temps_c)} steps"
                 + (f"\n{knobs}" if knobs else ""), fontsize="medium")
    return fig


# ---------------------------------------------------------------------------- the verb
@dataclass
class DriftReport:
    """What :func:`run_drift` found and wrote.

    Attributes
    ----------
    temps_k : ndarray (T,)
    tempco_mv_per_k : list of float
        Per channel, (out(T_last) − out(T_first))/(T_last − T_first) at the sweep point
        nearest 0 V input, mV/K (0 for a channel with no stages).
    max_shift_mv : list of float
        Per channel, the largest |out(T) − out(T_first)| over the sweep and temperatures.
    written : list of str
    """

    title: str
    temps_k: np.ndarray
    tempco_mv_per_k: list
    max_shift_mv: list
    names: tuple
    written: list = field(default_factory=list)

    def lines(self) -> list[str]:
        t = self.temps_k
        out = [f"{self.title}: {len(t)} temperatures {t[0] - 273.15:g} … "
               f"{t[-1] - 273.15:g} °C"]
        for c in range(3):
            out.append(f"  channel {c} ({self.names[c]}): {self.tempco_mv_per_k[c]:+.3f} mV/K "
                       f"at 0 V input; largest shift {self.max_shift_mv[c]:.2f} mV")
        out += [f"  wrote {p}" for p in self.written]
        return out


def run_drift(spec: ChainSpec, *, from_k: float, to_k: float, steps: int = 6, csv=None,
              png=None, strip_png=None, frame_source=None, points: int = 201,
              live: dict | None = None, force: bool = True) -> DriftReport:
    """``livecurve drift``: curves over temperature and a picture strip.

    Parameters
    ----------
    spec : ChainSpec
    from_k, to_k : float
        Temperature range, kelvin (−55 … +150 °C).
    steps : int
        Number of temperatures, 2…41 (6 to 11 reads well).
    csv, png, strip_png : path, optional
        Outputs (see the module docstring); each written all-or-nothing.
    frame_source : path or ndarray, optional
        A still for the strip instead of the built-in reference frame (scaled down to
        480 pixels wide).
    points : int
        Sweep points.
    live : dict, optional
        Knob values.
    force : bool
        Replace existing files.

    Returns
    -------
    DriftReport
        ``lines()`` gives the text the command line prints.
    """
    from livecurve.media.atomic import atomic_output, check_target
    from livecurve.outputs.plots import save_figure, write_png
    temps = temperature_steps(from_k, to_k, steps)
    for p in (csv, png, strip_png):
        if p is not None:
            check_target(p, force=force)
    vin, out = drift_curves(spec, temps, points=points, live=live)
    i0 = int(np.argmin(np.abs(vin)))
    span = temps[-1] - temps[0]
    tempco = [float((out[-1, c, i0] - out[0, c, i0]) / span * 1e3) for c in range(3)]
    shift = [float(np.abs(out[:, c] - out[0, c]).max() * 1e3) for c in range(3)]
    rep = DriftReport(spec.title, temps, tempco, shift, channel_names(spec.space))
    if csv is not None:
        with atomic_output(csv, force=force) as tmp:
            tmp.write_text(drift_csv_text(vin, out, temps))
        rep.written.append(str(csv))
    if png is not None:
        save_figure(png, drift_figure(vin, out, temps, spec, live=live), force=force)
        rep.written.append(str(png))
    if strip_png is not None:
        frame = None if frame_source is None else _load_still(frame_source, 480)
        frames = strip_frames(spec, temps, frame=frame, live=live)
        write_png(strip_png, tile_strip(frames, temps), force=force)
        rep.written.append(str(strip_png))
    return rep

