"""Step responses of each channel through the whole chain (tables and line filters), as
the engine computes them along a scan line: ``livecurve curve --step``.

Time convention (the CSV's ``time_ns`` column): the input is one value per pixel, held
for the whole pixel period T (a zero-order hold, as video arrives).  The step is at
t = 0: pixels before it hold ``from_v``, the pixel starting at t = 0 and all later ones
hold ``to_v``.  Each output sample is the stage's continuous output at the *end* of its
pixel (:mod:`livecurve.engine.dynamics`), so output row n of the line is written at
t = (n − lead + 1)·T: the first row at t > 0 is t = T, one pixel period after the step, and
the row at t = 0 is the settled level just before it.  Read this way the CSV is a
sampling of the continuous response to an ideal step at t = 0 (what an ngspice ``.tran``
of the same circuit with a step at t = 0 gives at those instants).
"""

from __future__ import annotations

import io

import numpy as np

from livecurve.config.chainfile import ChainSpec
from livecurve.engine.pipeline import FrameEngine
from livecurve.media.atomic import atomic_output
from livecurve.signal.component import channel_names, check_space
from livecurve.signal.timing import get_format

STEP_HEADER = "time_ns,out0_v,out1_v,out2_v"


def step_responses(spec: ChainSpec, *, samples: int = 400, lead: int = 40,
                   from_v: float = -0.35, to_v: float = 0.35, fmt: str | None = None):
    """Each channel's response to a step from *from_v* to *to_v* (centred volts) on one line.

    The line is sampled at the pixel clock of *fmt* (default: the chain's format, or 1080p30
    when the chain leaves it to the clip).  Returns (time_s (N,), out (3, N)): the step is
    at time 0 and each output is taken at the end of its pixel (module docstring), so
    time_s[n] = (n − lead + 1)·T.
    """
    check_space(spec.space)
    f = get_format(fmt or (spec.format if spec.format != "auto" else "1080p30"))
    eng = FrameEngine(spec, pixel_period_s=f.pixel_period_s)
    line = np.full((3, 1, samples), from_v, dtype=np.float32)
    line[:, :, lead:] = to_v
    out = eng.process(line)
    t = (np.arange(samples) - lead + 1) * f.pixel_period_s
    return t, out[:, 0, :].astype(np.float64)


def edge_window(t_s: np.ndarray, y: np.ndarray, pixel_period_s: float) -> tuple[float, float]:
    """The time span (s) around the step worth a close look: from 4 pixel periods before
    it to 8 pixel periods after the last channel first gets within 10 % of its final
    change (at least 16 pixel periods after the step)."""
    after = t_s >= 0
    settle = 0.0
    for ch in range(y.shape[0]):
        change = y[ch, -1] - y[ch, 0]
        if abs(change) < 1e-9:
            continue
        near = np.abs(y[ch] - y[ch, -1]) <= 0.1 * abs(change)
        idx = np.flatnonzero(near & after)
        if idx.size:
            settle = max(settle, float(t_s[idx[0]]))
    hi = max(settle + 8 * pixel_period_s, 16 * pixel_period_s)
    return -4 * pixel_period_s, min(hi, float(t_s[-1]))


def step_figure(t_s, y, spec: ChainSpec, *, pixel_period_s: float, fmt_name: str = ""):
    """Two panels: the whole settling (top) and the edge in detail, one marker per pixel
    (bottom); time in ns, output in V.  Returns a matplotlib Figure."""
    from livecurve.outputs.plots import chain_title, new_figure, plot_channels
    names = channel_names(spec.space)
    fig, (whole, edge) = new_figure(960, 760, nrows=2)
    t_ns = np.asarray(t_s) * 1e9
    plot_channels(whole, t_ns, y, names)
    whole.set_title("whole settling", fontsize="small")
    lo, hi = edge_window(np.asarray(t_s), y, pixel_period_s)
    sel = (t_s >= lo - 1e-15) & (t_s <= hi + 1e-15)
    plot_channels(edge, t_ns[sel], y[:, sel], names, marker="o")
    edge.set_title(f"edge in detail ({pixel_period_s * 1e9:.2f} ns per pixel"
                   f"{', ' + fmt_name if fmt_name else ''})", fontsize="small")
    for ax in (whole, edge):
        ax.axvline(0.0, color="#5a5a5a", linewidth=0.8, linestyle=":")
        ax.set_xlabel("time from the step [ns]")
        ax.set_ylabel("output [V]")
    whole.axvspan(lo * 1e9, hi * 1e9, color="#5a5a5a", alpha=0.08)
    fig.suptitle(chain_title(spec, "step response along a scan line"), fontsize="medium")
    return fig


def write_steps(spec: ChainSpec, *, csv=None, png=None, force: bool = True) -> None:
    """Write the step responses as CSV (``time_ns,out0_v,out1_v,out2_v``) and/or a figure
    (PNG, SVG or PDF by the extension of *png*)."""
    t, y = step_responses(spec)
    if csv:
        buf = io.StringIO()
        buf.write(STEP_HEADER + "\n")
        np.savetxt(buf, np.column_stack([t * 1e9, y.T]), fmt="%.9g", delimiter=",")
        with atomic_output(csv, force=force) as tmp:
            tmp.write_text(buf.getvalue())
        print(f"wrote {csv}")
    if png:
        from livecurve.outputs.plots import save_figure
        f = get_format(_format_name(spec))
        save_figure(png, step_figure(t, y, spec, pixel_period_s=f.pixel_period_s,
                                     fmt_name=f.name), force=force)
        print(f"wrote {png}")


def _format_name(spec: ChainSpec) -> str:
    return spec.format if spec.format != "auto" else "1080p30"
